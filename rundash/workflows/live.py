"""Live monitor, pipeline level: process a run while the recorder writes it.

Incremental processing, built from the same dsp functions as :func:`rundash.workflows.pipeline.
process_run` so the live vectors equal the offline ones (to the order-tracking
tolerances; measured in tests/workflows/test_live.py):

tach and vectors
    :class:`rundash.dsp.incremental.IncrementalTach` and
    :class:`~rundash.dsp.incremental.IncrementalOrders` (see there for how the live
    profile is made equal to the whole-record one).

:func:`record_live` ties the recorder (:mod:`rundash.ingest.recorder`), this processing
and the warning logic (:mod:`rundash.analysis.live_warnings`) together: every
``update_interval_s`` it appends the new vectors, the status (speed, acceleration, tach
state) and the new events in one short write transaction (the live page polls them).
When the source ends, the run is marked complete and processed whole by
:func:`rundash.workflows.pipeline.process_run` (findings included).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np

from rundash.analysis import live_warnings as lw
from rundash.conventions import lag_deg_from_phasor
from rundash.dsp import orders as dsp_orders
from rundash.dsp import tach as dsp_tach
from rundash.dsp.incremental import IncrementalOrders, IncrementalTach
from rundash.errors import RundashError
from rundash.ingest.recorder import RecordedChannel, RecordResult, record
from rundash.ingest.sources import Source
from rundash.model import MachineDescription
from rundash.storage import live_queries as lq
from rundash.storage import queries as q
from rundash.storage.engine import Database
from rundash.units import vector_amplitude_factor

#: Re-exported for the faces (they do not import analysis modules themselves).
WarningSettings = lw.WarningSettings
ExpectedBand = lw.ExpectedBand


# ----------------------------------------------------------------------------- processor
@dataclass(frozen=True)
class LiveParams:
    """Settings of the live processing and its warnings."""

    orders: tuple[float, ...] = (1.0, 2.0)
    revs_per_block: int = 1
    update_interval_s: float = 0.25  # wall-clock time between updates, at most ...
    max_step_record_s: float = 0.5  # ... and record time between updates, at most
    guard_revs: int = 4
    context_revs: int = 16
    speed_window_s: float = 1.0
    warnings: lw.WarningSettings = field(default_factory=lw.WarningSettings)
    # levels watched per probe; None: the machine description's site levels, else the
    # profile's field-run limits (profile_alarms)
    alarms: dict[str, Any] | None = None
    process_at_end: bool = True


@dataclass
class LiveUpdate:
    """What one step found: new blocks, the current state and new events."""

    track: dsp_orders.OrderTrack
    time_s: float
    speed_rpm: float | None
    accel_rpm_s: float | None
    tach_ok: bool
    n_revs: int
    events: list[lw.LiveEvent]


class LiveProcessor:
    """Tach, vectors and warnings of a run arriving in blocks of stored values.

    ``channels`` are the recorder's channels in the order of the value rows.
    """

    def __init__(self, desc: MachineDescription, fs: float,
                 channels: list[RecordedChannel], *, params: LiveParams | None = None,
                 monitor: lw.LiveWarnings | None = None):
        self.params = params or LiveParams()
        self.fs = float(fs)
        self.channels = channels
        self.tach_row = next(i for i, c in enumerate(channels) if c.role == "tach")
        self.probe_rows = [i for i, c in enumerate(channels) if c.role == "probe"]
        self.probes = [channels[i] for i in self.probe_rows]
        self.tach = IncrementalTach(fs, edge=desc.tach.edge, threshold=desc.tach.threshold,
                                    hysteresis=desc.tach.hysteresis,
                                    pulses_per_rev=desc.tach.pulses_per_rev)
        self.orders = IncrementalOrders(fs, len(self.probe_rows), orders=self.params.orders,
                                        revs_per_block=self.params.revs_per_block,
                                        guard_revs=self.params.guard_revs,
                                        context_revs=self.params.context_revs)
        self.monitor = monitor or lw.LiveWarnings()
        self.parts: list[dsp_orders.OrderTrack] = []

    def feed(self, values: np.ndarray, start_index: int) -> None:
        self.tach.feed(values[self.tach_row], start_index)
        self.orders.feed(values[self.probe_rows], start_index)

    def step(self, final: bool = False) -> LiveUpdate:
        self.tach.step(final)
        revs = self.tach.rev_times
        tr = self.orders.step(revs, final) if revs.size > dsp_tach.MIN_REVOLUTIONS else \
            dsp_orders.OrderTrack.empty(len(self.probes), self.params.orders)
        if tr.n_blocks:
            self.parts.append(tr)
        ok = self.tach.tach_ok()
        rpm, acc = lw.speed_and_acceleration(revs, window_s=self.params.speed_window_s)
        levels = {}
        if tr.n_blocks:
            for i, ch in enumerate(self.probes):
                d = tr.direct_pp[i] if ch.kind == "proximity" else tr.direct_rms[i]
                levels[ch.probe_name] = float(np.max(d))
        events = self.monitor.update(time_s=self.tach.time_s, speed_rpm=rpm if ok else None,
                                     accel_rpm_s=acc, levels=levels, tach_ok=ok)
        return LiveUpdate(track=tr, time_s=self.tach.time_s, speed_rpm=rpm, accel_rpm_s=acc,
                          tach_ok=ok, n_revs=max(revs.size - 1, 0), events=events)

    def track(self) -> dsp_orders.OrderTrack:
        """Every block found so far."""
        if not self.parts:
            return dsp_orders.OrderTrack.empty(len(self.probes), self.params.orders)
        return dsp_orders.concat_tracks(self.parts)

    def vector_rows(self, tr: dsp_orders.OrderTrack):
        """Rows for :func:`rundash.storage.live_queries.save_vectors`, in stored units."""
        rows = []
        for i, ch in enumerate(self.probes):
            afac = vector_amplitude_factor(ch.kind)
            direct = tr.direct_pp[i] if ch.kind == "proximity" else tr.direct_rms[i]
            for k, order in enumerate(tr.orders):
                v = tr.vectors[i, k]
                rows.append((ch.id, float(order), tr.time_s, tr.speed_rpm, afac * np.abs(v),
                             lag_deg_from_phasor(v), direct))
        return rows


# ----------------------------------------------------------------------------- context
def earlier_bands(db: Database, machine_name: str, *, exclude_run: int | None = None
                  ) -> tuple[lw.ExpectedBand, ...]:
    """Expected critical bands from the processed runs of a machine (confirmed criticals;
    all criticals when none is confirmed), read from the finding table. A band runs from
    the half-power speeds when both are known, else over the finding's band."""
    rows, fallback = [], []
    with db.read() as conn:
        runs = [r.id for r in q.list_runs(conn) if r.machine_name == machine_name
                and r.id != exclude_run and r.processed]
        found = q.load_finding_rows(conn, runs)
    for c in found:
        sp, d = c["speed_rpm"], c["details"] or {}
        if sp is None:
            continue
        if d.get("n1_rpm") is not None and d.get("n2_rpm") is not None:
            lo, hi = d["n1_rpm"], d["n2_rpm"]
        else:
            lo, hi = (d.get("band_rpm") or [math.nan, math.nan])[:2]
        item = (float(sp), float(lo if lo is not None else math.nan),
                float(hi if hi is not None else math.nan), f"run {c['run_id']}")
        (rows if c["classification"] == "confirmed" else fallback).append(item)
    return lw.expected_bands(rows or fallback)


def profile_alarms(desc: MachineDescription) -> tuple[dict[str, list[tuple[float, str, str]]], list[str]]:
    """Levels watched live per probe: the site's or OEM's direct levels of the machine
    description (``[[levels]]``) where given, they govern; else the profile's direct-level
    limits whose scope is a field run at any speed (a rule scoped to a shop test or a
    steady hold is never watched live: it would raise what is only a reference)."""
    from rundash.ingest.profile_file import load_profile

    units_of = {"proximity": "um pp", "velocity": "mm/s rms", "acceleration": "m/s2 rms"}
    notes: list[str] = []
    out: dict[str, list[tuple[float, str, str]]] = {}
    for lv in desc.levels:
        if lv.measure != "direct":
            continue
        u = units_of[desc.probe(lv.probe).kind]
        watch = []
        if lv.alert is not None:
            watch.append((lv.alert, u, f"the site alert level ({lv.source})"))
        if lv.trip is not None:
            watch.append((lv.trip, u, f"the site trip-style level ({lv.source})"))
        out[lv.probe] = watch
    try:
        prof = load_profile(desc.machine.profile)
    except RundashError as exc:
        if not out:
            notes.append(f"no levels watched: the guidance profile could not be loaded ({exc})")
        return out, notes
    skipped = []
    for p in desc.probes:
        if p.name in out:
            continue
        for rule in prof.limits:
            if rule.quantity == "direct" and rule.transducer == p.kind:
                # a live record is a field run moving through speeds: a rule scoped to a
                # shop test or a steady hold is not used (reference only, never raised)
                sc = rule.scope
                if sc.needs_hold or not (sc.covers("run-up") or sc.covers("coast-down")):
                    if rule.id not in skipped:
                        skipped.append(rule.id)
                    continue
                out[p.name] = [(rule.value(desc.machine.max_continuous_speed_rpm),
                                units_of[p.kind],
                                f"profile {prof.name} limit {rule.id} ({rule.source.document})")]
                break
    for rid in skipped:
        rule = next(r for r in prof.limits if r.id == rid)
        notes.append(f"profile {prof.name} limit {rid} is not watched live: it applies to "
                     f"{rule.scope.describe()}")
    if not out:
        notes.append("no levels watched live: the machine description gives no site levels "
                     f"([[levels]]) and the profile {desc.machine.profile!r} no direct-level "
                     "limit for a field run")
    return out, notes


# ----------------------------------------------------------------------------- session
@dataclass
class LiveResult:
    run_id: int
    n_samples: int
    state: str
    error: str | None
    n_blocks: int
    n_events: int
    processed: bool
    verdict: str | None
    notes: list[str]


def record_live(db: Database, desc: MachineDescription, source: Source, *,
                description_text: str = "", label: str = "", cycle: str = "",
                notes: str = "", started_at=None, params: LiveParams | None = None,
                log: Callable[[str], None] | None = None,
                on_update: Callable[[int, LiveUpdate], None] | None = None) -> LiveResult:
    """Record ``source`` as a new run and process it while it arrives (module doc)."""
    params = params or LiveParams()
    if params.alarms is None:
        alarms, alarm_notes = profile_alarms(desc)
    else:
        alarms, alarm_notes = dict(params.alarms), []
    bands = earlier_bands(db, desc.machine.name)
    monitor = lw.LiveWarnings(bands, alarms, params.warnings)
    st: dict[str, Any] = dict(proc=None, run_id=None, seq=0, last=time.monotonic(),
                              last_index=0, n_events=0, n_blocks=0)
    say = log or (lambda s: None)

    def write(upd: LiveUpdate, state: str, message: str = "") -> None:
        proc, run_id = st["proc"], st["run_id"]
        rows = proc.vector_rows(upd.track) if upd.track.n_blocks else []
        with db.write() as conn:
            if rows:
                lq.save_vectors(conn, run_id, st["seq"], rows)
            lq.save_status(conn, run_id, state=state, time_s=upd.time_s,
                           n_samples=proc.tach._end, speed_rpm=upd.speed_rpm,
                           accel_rpm_s=upd.accel_rpm_s, tach_ok=upd.tach_ok,
                           n_revs=upd.n_revs, message=message)
            lq.save_events(conn, run_id, [e.to_row() for e in upd.events])
        if rows:
            st["seq"] += 1
        st["n_blocks"] += upd.track.n_blocks
        st["n_events"] += len(upd.events)
        for e in upd.events:
            say(f"[{e.time_s:8.2f} s] {e.severity}: {e.message}")
        if on_update is not None:
            on_update(run_id, upd)

    def on_start(run_id: int, channels: list[RecordedChannel], fs: float) -> None:
        st["run_id"] = run_id
        st["proc"] = LiveProcessor(desc, fs, channels, params=params, monitor=monitor)
        start_events = [lw.LiveEvent(0.0, None, "recording", "info",
                                     f"recording started; expected critical bands: "
                                     f"{', '.join(b.label for b in bands) or 'none known'}",
                                     {"bands": [[b.lo_rpm, b.speed_rpm, b.hi_rpm] for b in bands],
                                      "alarms": {k: v[0] for k, v in alarms.items()}})]
        start_events += [lw.LiveEvent(0.0, None, "note", "info", n) for n in alarm_notes]
        with db.write() as conn:
            lq.save_status(conn, run_id, state="recording", time_s=0.0, n_samples=0,
                           speed_rpm=None, accel_rpm_s=None, tach_ok=True, n_revs=0)
            lq.save_events(conn, run_id, [e.to_row() for e in start_events])
        say(f"recording run {run_id}")

    def on_block(values: np.ndarray, start: int) -> None:
        proc = st["proc"]
        proc.feed(values, start)
        now = time.monotonic()
        end = start + values.shape[1]
        if (now - st["last"] >= params.update_interval_s
                or end - st["last_index"] >= params.max_step_record_s * proc.fs):
            st["last"], st["last_index"] = now, end
            write(proc.step(), "recording")

    def on_end(state: str, error: str | None) -> None:
        proc = st["proc"]
        if proc is None:
            return
        try:
            upd = proc.step(final=True)
        except RundashError as exc:  # the end of a broken record may not be trackable
            upd = LiveUpdate(dsp_orders.OrderTrack.empty(len(proc.probes), params.orders),
                             proc.tach.time_s, None, None, proc.tach.tach_ok(), 0, [])
            error = f"{error or ''} (last vectors: {exc})".strip()
        end = lw.LiveEvent(upd.time_s, upd.speed_rpm, "recording-ended",
                           "info" if error is None else "warning",
                           "recording ended" if error is None else
                           f"recording ended early: {error}")
        upd.events.append(end)
        write(upd, "ended" if error is None else "failed", error or "")

    res: RecordResult = record(db, desc, source, description_text=description_text,
                               label=label, cycle=cycle, notes=notes, started_at=started_at,
                               on_start=on_start, on_block=on_block, on_end=on_end)
    processed, verdict, out_notes = False, None, list(res.warnings)
    if params.process_at_end and res.n_samples > 0:
        from rundash.workflows.pipeline import process_run
        try:
            pr = process_run(db, res.run_id)
            processed = True
            verdict = (pr.findings or {}).get("run_verdict")
            msg = (f"run processed: {pr.n_revs} revolutions, "
                   f"{len((pr.findings or {}).get('criticals', []))} critical-speed findings, "
                   f"verdict {verdict}")
            sev = "info"
        except RundashError as exc:
            msg, sev = f"processing of the recorded run failed: {exc}", "warning"
            out_notes.append(msg)
        with db.write() as conn:
            lq.save_events(conn, res.run_id, [dict(time_s=float(res.n_samples) / float(
                st["proc"].fs), speed_rpm=None, kind="processed", severity=sev, message=msg,
                details={})])
        st["n_events"] += 1
        say(msg)
    return LiveResult(run_id=res.run_id, n_samples=res.n_samples, state=res.state,
                      error=res.error, n_blocks=st["n_blocks"], n_events=st["n_events"],
                      processed=processed, verdict=verdict, notes=out_notes)

