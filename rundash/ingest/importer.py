"""Import one data file as one run, in one transaction: it lands whole or not at all."""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import Iterator

import numpy as np

from rundash.errors import DuplicateRunError, InputError
from rundash.ingest import open_reader
from rundash.ingest.base import listing
from rundash.ingest.bounds import SAMPLE_RATE_HZ, out_of_range
from rundash.ingest.machine_file import check_profile
from rundash.model import RUN_KINDS, TEST_KINDS, MachineDescription
from rundash.progress import Progress, no_progress
from rundash.storage import queries as q
from rundash.storage.engine import Database
from rundash.units import STORAGE_UNIT, TO_STORAGE, TO_VOLTS, storage_factor, unit_from_text

#: A probe channel is reported as clipped when at least this fraction of its samples (and
#: at least CLIP_MIN_SAMPLES) sit exactly at its minimum or at its maximum value: a
#: saturated input or transducer holds its limit, while a live signal touches its exact
#: extreme only a few times (common practice, no source; the thresholds are our choice).
CLIP_FRACTION = 0.002
CLIP_MIN_SAMPLES = 20


@dataclass(frozen=True)
class ImportResult:
    run_id: int
    machine_id: int
    n_samples: int
    n_channels: int
    sample_rate_hz: float
    warnings: tuple[str, ...]
    #: one line: where the sample rate came from (time column unit, fit, declared rate)
    time_base: str = ""
    #: the start time used (given, or from the file's epoch time stamps), or None
    started_at: datetime | None = None


class _Failed:
    def __init__(self, exc: BaseException):
        self.exc = exc


def prefetched(blocks: Iterator, depth: int = 2) -> Iterator:
    """Iterate ``blocks`` in a worker thread, ``depth`` items ahead.

    Parsing and decoding (pandas' tokenizer, numpy, pyarrow, file reads) and the SQLite
    writes of the consumer both release the GIL, so on two cores reading the next block
    overlaps writing this one. An exception in the worker is raised here; leaving the
    loop early stops the worker and closes ``blocks``."""
    import queue
    import threading

    q: queue.Queue = queue.Queue(depth)
    stop = threading.Event()
    done = object()

    def put(item) -> bool:
        while not stop.is_set():
            try:
                q.put(item, timeout=0.05)
                return True
            except queue.Full:
                continue
        return False

    def run() -> None:
        try:
            for item in blocks:
                if not put(item):
                    break
            else:
                put(done)
        except BaseException as exc:  # handed to the consumer, raised there
            put(_Failed(exc))
        finally:
            close = getattr(blocks, "close", None)
            if close is not None:
                close()

    worker = threading.Thread(target=run, name="rundash-read-ahead", daemon=True)
    worker.start()
    try:
        while True:
            item = q.get()
            if item is done:
                break
            if isinstance(item, _Failed):
                raise item.exc
            yield item
    finally:
        stop.set()
        worker.join()


def file_sha256(path: Path, progress: Progress = no_progress) -> str:
    h = hashlib.sha256()
    size = max(path.stat().st_size, 1)
    done = 0
    with open(path, "rb") as fh:
        while True:
            b = fh.read(1 << 22)
            if not b:
                break
            h.update(b)
            done += len(b)
            progress(done / size, "checking file")
    return h.hexdigest()


class _BackgroundHash:
    """SHA-256 of a file computed in a thread while the import runs (hashlib releases
    the GIL on large buffers, so on two cores it costs almost no wall time)."""

    def __init__(self, path: Path):
        import threading
        self._digest: str | None = None
        self._error: BaseException | None = None
        self._thread = threading.Thread(target=self._run, args=(path,), daemon=True)
        self._thread.start()

    def _run(self, path: Path) -> None:
        try:
            self._digest = file_sha256(path)
        except BaseException as exc:  # re-raised in the importing thread
            self._error = exc

    def result(self) -> str:
        self._thread.join()
        if self._error is not None:
            raise InputError(f"cannot read the file to hash it: {self._error}")
        return self._digest


def _file_unit_factor(desc: MachineDescription, probe, stated: str, column: str,
                      name: str) -> float:
    """Check a channel's unit as the file states it against the machine description;
    the factor from the file's unit to the one the description assumes (mV -> V)."""
    unit = unit_from_text(stated) if stated else None
    if unit is None:
        return 1.0  # the file says nothing rundash knows: the description governs
    if desc.data.signal_units == "V":
        if unit in TO_VOLTS:
            return TO_VOLTS[unit]
        raise InputError(f"{name}: channel {column!r} (probe {probe.name}) is in {stated!r} by "
                         "the file, but [data].signal_units is 'V'; expected volts: set "
                         "signal_units = \"engineering\" for channels in engineering units")
    if unit in TO_VOLTS:
        raise InputError(f"{name}: channel {column!r} (probe {probe.name}) is in {stated!r} by "
                         "the file, but [data].signal_units is 'engineering'; expected "
                         f"{probe.units}: set signal_units = \"V\" and the probe's sensitivity")
    if unit != probe.units:
        kind = TO_STORAGE[unit][0]
        raise InputError(f"{name}: channel {column!r} is in {stated!r} by the file ({kind}), "
                         f"but probe {probe.name} says units = {probe.units!r}; expected the "
                         "same unit: correct [[probes]].units")
    return 1.0


def channel_plan(desc: MachineDescription, channels: tuple[str, ...], name: str,
                  file_units: dict[str, str] | None = None):
    """(file column index, role, probe, unit, scale) for the tach and every probe."""
    file_units = file_units or {}
    index = {c: i for i, c in enumerate(channels)}
    plan = []
    missing = [c for c in [desc.tach.column, *(p.column for p in desc.probes)] if c not in index]
    if missing:
        raise InputError(f"{name}: channel {missing[0]!r} named in the machine description is "
                         f"not in the file; the file has {listing(channels)}")
    plan.append((index[desc.tach.column], "tach", None, "V" if desc.data.signal_units == "V"
                 else "raw", 1.0))
    for p in desc.probes:
        factor = storage_factor(p.units, p.kind) * _file_unit_factor(
            desc, p, file_units.get(p.column, ""), p.column, name)
        if desc.data.signal_units == "V":
            scale = factor * 1000.0 / p.sensitivity_mv_per_unit  # V -> units -> storage unit
        else:
            scale = factor
        plan.append((index[p.column], "probe", p, STORAGE_UNIT[p.kind], scale))
    return plan


#: what ``--kind`` (and the dashboard's import page) accepts: a field run's direction
#: (corrected by processing from the speed profile), or a marked shop (mechanical
#: running) test or overspeed trip test
IMPORT_KINDS: tuple[str, ...] = RUN_KINDS + tuple(k for k in TEST_KINDS if k != "field")


def split_import_kind(kind: str) -> tuple[str, str]:
    """``(direction, test_kind)`` of an :data:`IMPORT_KINDS` value: ``'shop-test'`` ->
    ``('mixed', 'shop-test')``, ``'run-up'`` -> ``('run-up', 'field')``."""
    if kind not in IMPORT_KINDS:
        raise InputError(f"Invalid value for 'kind': allowed {', '.join(IMPORT_KINDS)}, "
                         f"got {kind!r}")
    return (kind, "field") if kind in RUN_KINDS else ("mixed", kind)


def import_run(db: Database, data_path: str | Path, desc: MachineDescription, *,
               description_text: str = "", label: str = "", cycle: str = "",
               notes: str = "", started_at: datetime | None = None, kind: str = "mixed",
               force: bool = False, progress: Progress = no_progress,
               test_kind: str = "field") -> ImportResult:
    """Import ``data_path`` as a new run of the machine ``desc`` describes.

    The file is streamed block by block into waveform chunks of
    :data:`~rundash.storage.queries.CHUNK_SAMPLES` samples. Every row is written in one
    write transaction; any error rolls it back and leaves the database as it was.
    ``kind`` (the direction) may be corrected by processing once the speed profile is
    known; ``test_kind`` (``'field'``, ``'shop-test'``, ``'trip-test'``) is what the run
    records, and decides which of the profile's rules are in scope.
    """
    path = Path(data_path)
    check_profile(desc)
    if kind not in RUN_KINDS:
        raise InputError(f"Invalid value for 'kind': allowed {', '.join(RUN_KINDS)}, got {kind!r}")
    if test_kind not in TEST_KINDS:
        raise InputError(f"Invalid value for 'test_kind': allowed {', '.join(TEST_KINDS)}, "
                         f"got {test_kind!r}")
    if started_at is not None and started_at.tzinfo is None:
        raise InputError("Invalid value for 'started_at': allowed a UTC time with its zone "
                         f"(e.g. 2026-05-01T06:00:00Z), got {started_at.isoformat()!r}")
    reader = open_reader(path, desc.data)
    stream = None
    try:
        plan = channel_plan(desc, reader.channels, path.name)
        names = [reader.channels[col] for col, *_ in plan]
        reader.select(names)  # blocks now hold the plan's channels, in its order
        fs = reader.sample_rate_hz  # a time column is read and fitted here
        if reader.units:  # units the file states (MDF): checked against the description
            plan = channel_plan(desc, reader.channels, path.name, reader.units)
        if bad := out_of_range(fs, SAMPLE_RATE_HZ):
            raise InputError(f"{path.name}: sample rate: {bad} (from the file's header or "
                             "time column, or [data].sample_rate_hz: check its unit)")
        if started_at is None:
            started_at = reader.start_time
        hasher = _BackgroundHash(path)
        warnings: list[str] = []
        unused = [c for c in reader.channels if c not in set(names)]
        if unused:
            warnings.append(f"file channels not named in the machine description were not "
                            f"stored: {listing(sorted(unused))}")
        with db.write() as conn:
            mid, _ = q.upsert_machine(conn, desc)
            run_id = q.create_run(
                conn, machine_id=mid, kind=kind, test_kind=test_kind, label=label or path.stem,
                cycle=cycle,
                notes=notes, started_at=started_at, source_name=path.name, source_sha256="",
                sample_rate_hz=fs, description_toml=description_text)
            ch_ids = []
            for pos, (col, role, probe, unit, scale) in enumerate(plan):
                ch_ids.append(q.add_channel(
                    conn, run_id=run_id, position=pos, name=reader.channels[col], role=role,
                    probe_name=probe.name if probe else None, kind=probe.kind if probe else None,
                    unit=unit, scale=scale, sample_rate_hz=fs))
            scales = np.array([s for *_, s in plan])[:, None]
            unit_scale = bool(np.all(scales == 1.0))
            stats_min = np.full(len(plan), np.inf)
            stats_max = np.full(len(plan), -np.inf)
            at_ext = np.zeros((2, len(plan)), dtype=np.int64)  # samples at min, at max
            start = 0
            chunk_index = 0
            pending: list[np.ndarray] = []
            pending_n = 0
            stream = prefetched(reader.blocks(q.CHUNK_SAMPLES))
            for block, frac in stream:
                sel = block
                if not unit_scale:
                    sel *= scales.astype(sel.dtype)
                pending.append(sel)
                pending_n += block.shape[1]
                while pending_n >= q.CHUNK_SAMPLES:
                    data = np.concatenate(pending, axis=1) if len(pending) > 1 else pending[0]
                    chunk, rest = data[:, :q.CHUNK_SAMPLES], data[:, q.CHUNK_SAMPLES:]
                    start, chunk_index = _flush(conn, ch_ids, chunk, start, chunk_index, fs,
                                                stats_min, stats_max, names, path.name, at_ext)
                    pending, pending_n = ([rest], rest.shape[1]) if rest.shape[1] else ([], 0)
                progress(frac, "importing")
            stream.close()
            if pending_n:
                data = np.concatenate(pending, axis=1)
                start, chunk_index = _flush(conn, ch_ids, data, start, chunk_index, fs,
                                            stats_min, stats_max, names, path.name, at_ext)
            if start == 0:
                raise InputError(f"{path.name}: no samples")
            warnings.extend(reader.warnings)
            if reader.sample_rate_hz != fs:  # a time column's fit, refined over the file
                fs = reader.sample_rate_hz
                q.set_run_sample_rate(conn, run_id, fs)
            for i, (col, role, probe, unit, _) in enumerate(plan):
                if stats_max[i] == stats_min[i]:
                    warnings.append(f"channel {reader.channels[col]!r}"
                                    f"{' (probe ' + probe.name + ')' if probe else ' (tach)'} is "
                                    f"flat: every sample equals {stats_min[i]:g} {unit}")
                elif role == "probe":
                    n_lo, n_hi = at_ext[:, i]
                    need = max(CLIP_MIN_SAMPLES, CLIP_FRACTION * start)
                    at = [f"{n} at its {side} {v:g} {unit}" for n, side, v in (
                        (n_lo, "minimum", stats_min[i]), (n_hi, "maximum", stats_max[i]))
                        if n >= need]
                    if at:
                        warnings.append(
                            f"channel {reader.channels[col]!r} (probe {probe.name}) looks "
                            f"clipped: {' and '.join(at)} of {start} samples (a saturated "
                            "input or transducer); amplitudes near the limit are too low")
            sha = hasher.result()
            dup = q.find_run_by_hash(conn, sha)
            if dup is not None and not force:
                raise DuplicateRunError(
                    f"{path.name}: this file was imported before as run {dup} (same content "
                    "hash); use --force to import it again")
            q.set_channel_lengths(conn, {cid: start for cid in ch_ids})
            q.update_run(conn, run_id, n_samples=start, state="complete", warnings=warnings,
                         source_sha256=sha)
            progress(1.0, "importing")
    finally:
        if stream is not None:
            stream.close()  # the read-ahead thread ends before the reader closes
        reader.close()
    return ImportResult(run_id=run_id, machine_id=mid, n_samples=start, n_channels=len(plan),
                        sample_rate_hz=fs, warnings=tuple(warnings), time_base=reader.time_note,
                        started_at=started_at)


def _flush(conn, ch_ids, chunk, start, chunk_index, fs, smin, smax, names, source, at_ext):
    with np.errstate(over="ignore"):
        chunk32 = chunk.astype(np.float32, copy=False)
    lo, hi = chunk32.min(axis=1), chunk32.max(axis=1)  # NaN propagates, inf shows
    if not (np.isfinite(lo).all() and np.isfinite(hi).all()):
        bad = ~np.isfinite(chunk32)
        ch, idx = np.argwhere(bad)[0]
        value = chunk[ch, idx]
        if not np.isfinite(value):
            raise InputError(f"{source}: channel {names[ch]!r}, sample {start + idx}: value "
                             f"{value!r} is not a finite number")
        raise InputError(f"{source}: channel {names[ch]!r}, sample {start + idx}: value "
                         f"{value:.6g} after scaling does not fit a float32 sample "
                         "(expected |value| < 3.4e38 in the stored unit)")
    # samples exactly at the extremes so far (clipping check): restart a count where the
    # chunk sets a new extreme, add to it where the chunk meets the old one
    for k, (ext, new, better) in enumerate(((smin, lo, lo < smin), (smax, hi, hi > smax))):
        n_at = np.count_nonzero(chunk32 == new[:, None], axis=1)
        at_ext[k] = np.where(better, n_at, at_ext[k] + np.where(new == ext, n_at, 0))
    np.minimum(smin, lo, out=smin)
    np.maximum(smax, hi, out=smax)
    q.write_chunks(conn, [(cid, chunk_index, start, chunk32[i]) for i, cid in enumerate(ch_ids)],
                   fs)
    return start + chunk.shape[1], chunk_index + 1
