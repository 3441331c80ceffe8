"""The glue: load a run from storage, run dsp and analysis, save the results.

``process_run(db, run_id)`` reads the tach channel whole (one float32 channel), builds
the once-per-rev reference and the speed profile, then streams every probe channel
chunk by chunk through the order tracker and the cascade (never the whole record in
memory), compensates slow roll on proximity probes, finds the critical speeds and judges
them, and replaces the run's results in one write transaction.
"""

from __future__ import annotations

import warnings
from dataclasses import asdict, dataclass, field
from typing import Any, Sequence

import numpy as np

from rundash import __version__
from rundash.conventions import lag_deg_from_phasor
from rundash.dsp import orders as dsp_orders
from rundash.dsp import slowroll, spectra, speed, tach
from rundash.errors import DspError, RundashError, StorageError
from rundash.ingest.machine_file import parse_machine_description
from rundash.model import MachineDescription, TachSpec
from rundash.progress import Progress, no_progress
from rundash.storage import queries as q
from rundash.storage.engine import Database
from rundash.units import VECTOR_AMPLITUDE_CONVENTION
from rundash.workflows import findings as findings_mod


@dataclass(frozen=True)
class ProcessingParams:
    """What processing used; stored with the results."""

    orders: tuple[float, ...] = (1.0, 2.0, 3.0, 4.0)
    revs_per_block: int = 1
    slow_roll_rpm: tuple[float, float] | None = None  # None: chosen automatically
    cascade_speed_step_rpm: float = 50.0
    cascade_max_rows: int = 200
    cascade_n_fft: int | None = None  # None: from the sample rate (~0.5 s window)
    cascade_max_order: float = 10.0
    cascade_max_bins: int = 512

    def to_dict(self) -> dict[str, Any]:
        d = asdict(self)
        d["orders"] = list(self.orders)
        d["slow_roll_rpm"] = None if self.slow_roll_rpm is None else list(self.slow_roll_rpm)
        return d


@dataclass
class ProcessResult:
    run_id: int
    run_kind: str
    n_revs: int
    n_blocks: int
    slow_roll_rpm: tuple[float, float] | None
    warnings: list[str] = field(default_factory=list)
    findings: dict[str, Any] | None = None


def _description(conn, run_id: int) -> MachineDescription:
    text = q.run_description_toml(conn, run_id)
    if text:
        return parse_machine_description(text, f"run {run_id} machine description")
    info = q.get_machine(conn, q.run_machine_id(conn, run_id))
    from rundash.model import DataSpec
    return MachineDescription(machine=info.spec, tach=info.tach or TachSpec(column=""),
                              probes=info.probes, data=DataSpec())


def _n_fft(fs: float) -> int:
    n = 1 << int(np.round(np.log2(max(fs * 0.5, 64))))
    return int(min(max(n, 256), 16384))


def process_run(db: Database, run_id: int, *, params: ProcessingParams | None = None,
                progress: Progress = no_progress) -> ProcessResult:
    """Process a stored run and replace its results in one transaction."""
    params = params or ProcessingParams()
    notes: list[str] = []
    with db.read() as conn:
        run = q.get_run(conn, run_id)
        if run.state == "importing":
            raise StorageError(f"run {run_id} is still being imported")
        desc = _description(conn, run_id)
        channels = q.list_channels(conn, run_id)
        tach_ch = next((c for c in channels if c.role == "tach"), None)
        probes = [c for c in channels if c.role == "probe"]
        if tach_ch is None:
            raise StorageError(f"run {run_id} has no tach channel")
        if not probes:
            raise StorageError(f"run {run_id} has no probe channels")
        progress(0.0, "tach")
        tach_x = q.read_channel(conn, tach_ch.id)
    fs = tach_ch.sample_rate_hz

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        edges = tach.detect_edges(tach_x, fs, edge=desc.tach.edge, threshold=desc.tach.threshold,
                                  hysteresis=desc.tach.hysteresis)
        del tach_x
        opr = tach.once_per_rev(edges, desc.tach.pulses_per_rev)
        profile = speed.speed_profile(opr.times_s)
        segments = speed.segment(profile)
        kind = speed.run_kind(segments)
    notes += [f"{w.category.__name__}: {w.message}" for w in caught]
    progress(1.0, "tach")

    tracker = dsp_orders.OrderTracker(profile, fs, len(probes), orders=params.orders,
                                      revs_per_block=params.revs_per_block)
    row_t, row_rpm = spectra.cascade_plan(profile, speed_step_rpm=params.cascade_speed_step_rpm,
                                          max_rows=params.cascade_max_rows)
    n_fft = params.cascade_n_fft or _n_fft(fs)
    f_max = min(fs / 2, params.cascade_max_order * float(np.max(row_rpm)) / 60.0 * 1.05)
    casc_amp: list[np.ndarray | None] = [None] * len(probes)
    casc_done = np.zeros(row_t.size, dtype=bool)
    freq_hz = None
    parts = []
    tail = None
    tail_start = 0
    total = max(tach_ch.n_samples, 1)
    with db.read() as conn:
        for start, block in q.iter_run_chunks(conn, [c.id for c in probes]):
            parts.append(tracker.feed(block, start))
            # cascade rows need n_fft samples around their time: keep an overlap
            if tail is not None:
                buf = np.concatenate([tail, block], axis=1)
                buf_start = tail_start
            else:
                buf, buf_start = block, start
            todo = ~casc_done
            if todo.any():
                for i in range(len(probes)):
                    done, freq_hz, amp = spectra.cascade_rows(
                        buf[i], fs, buf_start, row_t[todo], n_fft=n_fft, f_max_hz=f_max,
                        max_bins=params.cascade_max_bins)
                    if casc_amp[i] is None:
                        casc_amp[i] = np.zeros((row_t.size, amp.shape[1]), np.float32)
                    casc_amp[i][np.flatnonzero(todo)[done]] = amp[done]
                casc_done[np.flatnonzero(todo)[done]] = True
            keep = min(n_fft, buf.shape[1])
            tail, tail_start = buf[:, -keep:], buf_start + buf.shape[1] - keep
            progress((start + block.shape[1]) / total, "order tracking")
        parts.append(tracker.finish())
    track = dsp_orders.concat_tracks(parts)
    if track.n_blocks < 3:
        raise DspError(f"run {run_id}: only {track.n_blocks} whole revolutions could be tracked")
    progress(1.0, "order tracking")

    # slow-roll compensation: proximity probes only, never seismic channels
    window = params.slow_roll_rpm or slowroll.auto_slow_roll_window(track.speed_rpm, track.time_s)
    is_prox = np.array([c.kind == "proximity" for c in probes])
    comp = track.vectors.copy()
    if window is not None and is_prox.any():
        sr = slowroll.slow_roll_vector(track.speed_rpm, track.vectors[is_prox], window)
        comp[is_prox] = slowroll.compensate(track.vectors[is_prox], sr)
    elif is_prox.any():
        notes.append("no slow-roll window found (no low, steady speed band): proximity vectors "
                     "are not compensated")

    result = ProcessResult(run_id=run_id, run_kind=kind, n_revs=opr.n_revs,
                           n_blocks=track.n_blocks, slow_roll_rpm=window, warnings=notes)

    findings = findings_mod.build_findings(
        desc=desc, run=run, probes=probes, track=track, compensated=comp,
        segments=segments, slow_roll_rpm=window, processing_notes=notes)
    result.findings = findings

    tach_report = dict(
        pulses_per_rev=opr.pulses_per_rev, n_edges=int(edges.size), n_revs=opr.n_revs,
        n_missing_filled=opr.n_missing_filled, n_extra_removed=opr.n_extra_removed,
        repair_times_s=[round(float(t), 6) for t in opr.repair_times_s[:1000]],
        notes=list(opr.notes))
    seg_list = [dict(kind=s.kind, t_start_s=s.t_start_s, t_end_s=s.t_end_s,
                     rpm_start=s.rpm_start, rpm_end=s.rpm_end) for s in segments]
    rev_mid = 0.5 * (opr.times_s[:-1] + opr.times_s[1:])
    with db.write() as conn:
        q.clear_results(conn, run_id)
        q.save_tach(conn, run_id, "edges", edges)
        q.save_tach(conn, run_id, "once_per_rev", opr.times_s)
        q.save_processing(conn, run_id, version=__version__, params=params.to_dict(),
                          slow_roll_rpm=window, tach_report=tach_report, segments=seg_list,
                          warnings=notes)
        q.save_speed_profile(conn, run_id, rev_mid, profile.rpm(rev_mid))
        for i, ch in enumerate(probes):
            afac = 2.0 if VECTOR_AMPLITUDE_CONVENTION[ch.kind] == "pp" else 1.0
            direct = track.direct_pp[i] if ch.kind == "proximity" else track.direct_rms[i]
            for k, order in enumerate(track.orders):
                for compensated, vec in ((False, track.vectors), (True, comp)):
                    if compensated and not is_prox[i]:
                        continue
                    v = vec[i, k]
                    q.save_track(conn, run_id, ch.id, float(order), compensated, track.time_s,
                                 track.speed_rpm, afac * np.abs(v), lag_deg_from_phasor(v),
                                 direct)
            if casc_amp[i] is not None and casc_done.any():
                q.save_cascade(conn, run_id, ch.id, row_rpm[casc_done], row_t[casc_done],
                               freq_hz, casc_amp[i][casc_done])
        q.save_findings_json(conn, run_id, findings)
        q.save_finding_rows(conn, run_id, findings_mod.finding_rows(findings))
        q.update_run(conn, run_id, kind=kind)
    progress(1.0, "saving")
    return result
