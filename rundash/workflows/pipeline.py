"""The glue: load a run from storage, run dsp and analysis, save the results.

``process_run(db, run_id)`` streams the tach channel chunk by chunk through the edge
detector (:class:`rundash.dsp.tach.EdgeDetector`: a level pass, then an edge pass; the
channel is held in memory between the two only when it is short), builds the
once-per-rev reference and the speed profile, then streams every probe channel chunk by
chunk through the order tracker and the cascade (a reader thread decodes the next chunks
while the current one is tracked), compensates slow roll on proximity probes (velocity probes'
overall is band-limited on the way, :mod:`rundash.dsp.overall`), finds the critical
speeds and judges them, and replaces the run's results in one write transaction. That
transaction is held by a writer thread (:class:`_ResultWriter`) that writes the vector
tracks and cascades while the findings are computed, then adds the findings and commits;
an error on either side rolls it all back.

Memory: the samples are never held whole (a few chunks of every channel at a time), and
neither are the per-revolution results of every order: each channel's vectors and direct
levels go to a temporary file of its own as they are found (:class:`_Results`); the
proximity probes' slow-roll-compensated vectors are computed once, one channel at a
time, into files of their own that the save reads back; what the analysis reads across
probes (the 1X, uncompensated and compensated, and one direct level: 20 bytes per block
and probe) is one more temporary file (:class:`_ProbeRows`) that findings read a probe
at a time, and the modal fit holds the compensated 1X of only the blocks in the speed
range its bands can take (:func:`rundash.analysis.transient.fit_speed_range`), each fit
the sweep history of its own blocks and their pre-roll only. The save holds one order of
one probe at a time. What still grows with the run's length is per block, shared by every
probe (block times, speeds, the tach events and the speed profile), and one probe's
results at a time in the findings.

``ProcessResult.stage_s`` and ``stage_cpu_s`` hold the wall and CPU seconds spent per
stage (:data:`STAGES`); ``rundash process --timings`` prints them.
"""

from __future__ import annotations

import contextvars
import ctypes
import tempfile
import threading
import time
import warnings
from contextlib import ExitStack, contextmanager
from dataclasses import asdict, dataclass, field, replace
from typing import Any, Iterator

import numpy as np

from rundash import __version__
from rundash.analysis.criticals import first_candidate_rpm
from rundash.conventions import lag_deg_from_phasor
from rundash.dsp import orders as dsp_orders
from rundash.dsp import overall, slowroll, spectra, speed, tach
from rundash.dsp.vold_kalman import vold_kalman_at
from rundash.errors import DspError, StorageError
from rundash.ingest.importer import prefetched
from rundash.ingest.machine_file import TRACKER_NAMES, parse_machine_description
from rundash.model import MachineDescription, TachSpec
from rundash.progress import Progress, no_progress
from rundash.storage import queries as q
from rundash.storage.engine import Database
from rundash.units import vector_amplitude_factor
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
    tracker: str | None = None  # None: [processing] tracker of the machine description, else "order"

    def to_dict(self) -> dict[str, Any]:
        d = asdict(self)
        d["orders"] = list(self.orders)
        d["slow_roll_rpm"] = None if self.slow_roll_rpm is None else list(self.slow_roll_rpm)
        return d


#: Stages of processing, in order, as reported in ``ProcessResult.stage_s``. "read" is the
#: storage reads and decoding (in a second thread while the probes are tracked, so the
#: stages add up to more than the wall time).
STAGES = ("read", "tach", "speed", "tracking", "cascade", "findings", "modal fits", "save")

#: A tach channel of at most this many samples is kept in memory between the edge
#: detector's passes (64 MB of float32); a longer one is read again.
TACH_CACHE_SAMPLES = 1 << 24
#: The trackers ``rundash process --tracker`` and ``[processing] tracker`` name:
#: "order", computed order tracking (a DFT over each block of whole revolutions), and
#: "vold-kalman", the Vold–Kalman filter of all orders jointly (:mod:`rundash.dsp.vold_kalman`).
TRACKERS = TRACKER_NAMES
#: Full -3 dB bandwidth of the Vold–Kalman filter in orders (common practice, no source).
VK_BANDWIDTH_ORDERS = 0.1
#: Chunks decoded ahead of the tracker by the reader thread.
PREFETCH_CHUNKS = 2


@dataclass
class ProcessResult:
    run_id: int
    run_kind: str
    n_revs: int
    n_blocks: int
    slow_roll_rpm: tuple[float, float] | None
    warnings: list[str] = field(default_factory=list)
    findings: dict[str, Any] | None = None
    stage_s: dict[str, float] = field(default_factory=dict)
    stage_cpu_s: dict[str, float] = field(default_factory=dict)
    wall_s: float = 0.0


class StageTimer:
    """Wall and CPU seconds spent per stage (``with timer("tracking"): ...``), summed over
    every entry; thread-safe (CPU seconds are the entering thread's own); a stage entered
    inside another takes its time out of the outer one."""

    def __init__(self):
        self.seconds: dict[str, float] = {}
        self.cpu_seconds: dict[str, float] = {}
        self._lock = threading.Lock()
        self._local = threading.local()

    def add(self, stage: str, seconds: float, cpu_seconds: float = 0.0) -> None:
        with self._lock:
            self.seconds[stage] = self.seconds.get(stage, 0.0) + seconds
            self.cpu_seconds[stage] = self.cpu_seconds.get(stage, 0.0) + cpu_seconds

    @contextmanager
    def __call__(self, stage: str):
        # nested stages are exclusive: time in an inner stage is not counted in the outer
        stack = self._local.__dict__.setdefault("stack", [])
        t0, c0 = time.perf_counter(), time.thread_time()
        stack.append([0.0, 0.0])
        try:
            yield
        finally:
            dt, dc = time.perf_counter() - t0, time.thread_time() - c0
            inner = stack.pop()
            self.add(stage, dt - inner[0], dc - inner[1])
            if stack:
                stack[-1][0] += dt
                stack[-1][1] += dc

    def _order(self) -> list[str]:
        known = [s for s in STAGES if s in self.seconds]
        return known + sorted(set(self.seconds) - set(known))

    def ordered(self) -> dict[str, float]:
        return {s: self.seconds[s] for s in self._order()}

    def ordered_cpu(self) -> dict[str, float]:
        return {s: self.cpu_seconds[s] for s in self._order()}


def _timed_chunks(conn, channel_ids, timer: StageTimer) -> Iterator[tuple[int, np.ndarray]]:
    """``q.iter_run_chunks`` with the time spent reading and decoding added to "read"."""
    it = q.iter_run_chunks(conn, channel_ids)
    while True:
        with timer("read"):
            item = next(it, None)
        if item is None:
            return
        yield item


def _prefetched(db: Database, channel_ids, timer: StageTimer) -> Iterator[tuple[int, np.ndarray]]:
    """Chunks of the channels, read and decoded by a second thread up to
    :data:`PREFETCH_CHUNKS` ahead (SQLite and numpy copies run without the GIL, so the
    reading overlaps the tracking); errors of the reader are raised here."""
    def chunks():
        with db.read() as conn:
            yield from _timed_chunks(conn, channel_ids, timer)

    return prefetched(chunks(), depth=PREFETCH_CHUNKS)


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


def _edges(db: Database, tach_ch, desc: MachineDescription,
           timer: StageTimer) -> tuple[np.ndarray, float | None]:
    """Tach events of the whole channel, streamed (the channel is held in memory between
    the detector's passes only up to :data:`TACH_CACHE_SAMPLES`), and the sample
    intervals their edges span (:func:`rundash.dsp.tach.edge_samples`)."""
    fs = tach_ch.sample_rate_hz
    det = tach.EdgeDetector(tach_ch.n_samples, fs, edge=desc.tach.edge,
                            threshold=desc.tach.threshold, hysteresis=desc.tach.hysteresis)
    cache: list[tuple[int, np.ndarray]] | None = [] if tach_ch.n_samples <= TACH_CACHE_SAMPLES \
        else None

    def chunks():
        if cache:
            yield from cache
            return
        with db.read() as conn:
            for start, block in _timed_chunks(conn, [tach_ch.id], timer):
                if cache is not None:
                    cache.append((start, block[0]))
                yield start, block[0]

    while det.needs_pass:
        for start, x in chunks():
            with timer("tach"):
                det.feed_levels(x, start)
        with timer("tach"):
            det.end_pass()
    parts, spans = [], []
    for start, x in chunks():
        with timer("tach"):
            parts.append(det.feed(x, start))
            spans.append(tach.edge_spans(x, fs, parts[-1], t0=start / fs, max_events=200))
    parts.append(det.finish())
    return np.concatenate(parts), tach.edge_samples(None, fs, None, spans=np.concatenate(spans))


def _return_free_memory() -> None:
    """Hand the C allocator's free pages back to the operating system (glibc's
    ``malloc_trim``; nothing elsewhere). After a stage's large temporaries are freed,
    glibc keeps most of them in its heap (its mmap threshold rises with every large block
    freed), so the process's resident size would stay at the stage's peak: measured on
    a 2-hour run, 250 MB resident after the speed stage instead of 166."""
    global _TRIM
    if _TRIM is None:
        try:
            _TRIM = ctypes.CDLL(None).malloc_trim
        except (OSError, AttributeError, TypeError):
            _TRIM = False
    if _TRIM:
        _TRIM(0)


_TRIM: Any = None


class _Results:
    """Per-block results of the tracker, kept out of memory as they are found.

    Block times, speeds and revolution indices (shared by every channel) are held in
    arrays sized once; each channel's vectors (complex64) and direct levels (float32) are
    appended to an anonymous temporary file of its own (40 bytes per block and channel
    with 4 orders; the operating system removes the file when it is closed or the process
    dies), so what processing holds does not grow with the number of channels times the
    run's length: analysis and the save read the channels back one at a time
    (:meth:`channel`)."""

    def __init__(self, n_ch: int, orders, n_max: int):
        self.orders = np.asarray(orders, dtype=np.float64)
        self.dtype = np.dtype([("v", np.complex64, (self.orders.size,)), ("pp", np.float32),
                               ("rms", np.float32)])
        self.time_s = np.empty(n_max)
        self.speed_rpm = np.empty(n_max)
        self.rev_index = np.empty(n_max, np.int64)
        self.n = 0
        self._files = [tempfile.TemporaryFile(prefix="rundash-track-") for _ in range(n_ch)]
        self._rms: dict[int, np.ndarray] = {}  # channel -> its rms, replaced (replace_rms)
        self._comp: dict[int, Any] = {}  # channel -> file of its compensated vectors

    def add(self, tr: dsp_orders.OrderTrack) -> None:
        a, b = self.n, self.n + tr.n_blocks
        self.time_s[a:b] = tr.time_s
        self.speed_rpm[a:b] = tr.speed_rpm
        self.rev_index[a:b] = tr.rev_index
        rec = np.empty(tr.n_blocks, self.dtype)
        for i, fh in enumerate(self._files):
            rec["v"] = tr.vectors[i].T
            rec["pp"] = tr.direct_pp[i]
            rec["rms"] = tr.direct_rms[i]
            fh.write(rec.tobytes())
        self.n = b

    def channel(self, i: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Channel ``i``'s vectors (complex64, shape (n_orders, n)), direct p-p and rms."""
        fh = self._files[i]
        fh.flush()
        fh.seek(0)
        rec = np.frombuffer(fh.read(self.n * self.dtype.itemsize), self.dtype)
        rms = self._rms.get(i)
        return (np.ascontiguousarray(rec["v"].T), np.ascontiguousarray(rec["pp"]),
                np.ascontiguousarray(rec["rms"]) if rms is None else rms.copy())

    def order_row(self, i: int, k: int) -> np.ndarray:
        """Channel ``i``'s vectors of order ``k`` (complex64, shape (n,)), read
        :data:`CONVERT_BLOCKS` blocks at a time (what the save holds of a channel)."""
        return self._field(i, lambda rec: rec["v"][:, k], np.complex64)

    def level(self, i: int, proximity: bool) -> np.ndarray:
        """Channel ``i``'s direct level: p-p for a proximity probe, else rms (float32)."""
        if not proximity and i in self._rms:
            return self._rms[i].copy()
        name = "pp" if proximity else "rms"
        return self._field(i, lambda rec: rec[name], np.float32)

    def _field(self, i: int, take, dtype) -> np.ndarray:
        fh = self._files[i]
        fh.flush()
        fh.seek(0)
        out = np.empty(self.n, dtype)
        for a in range(0, self.n, CONVERT_BLOCKS):
            m = min(CONVERT_BLOCKS, self.n - a)
            out[a:a + m] = take(np.frombuffer(fh.read(m * self.dtype.itemsize), self.dtype))
        fh.seek(0, 2)
        return out

    def replace_rms(self, i: int, rms) -> None:
        """Channel ``i``'s direct rms from now on (e.g. a band-limited overall), float32."""
        self._rms[i] = np.asarray(rms, dtype=np.float32)

    def set_vectors(self, i: int, vectors: np.ndarray) -> None:
        """Replace channel ``i``'s vectors (shape (n_orders, n)); its direct levels stay."""
        _, pp, rms = self.channel(i)
        rec = np.empty(self.n, self.dtype)
        rec["v"], rec["pp"], rec["rms"] = np.asarray(vectors).T, pp, rms
        fh = self._files[i]
        fh.seek(0)
        fh.write(rec.tobytes())
        fh.seek(0, 2)

    def blocks(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Block times, speeds and revolution indices."""
        n = self.n
        return self.time_s[:n], self.speed_rpm[:n], self.rev_index[:n]

    def set_compensated_row(self, i: int, k: int, row: np.ndarray) -> None:
        """Order ``k`` of channel ``i``'s slow-roll-compensated vectors (complex64, shape
        (n,)), kept in a temporary file of the channel's own for :meth:`compensated_row`."""
        fh = self._comp.get(i)
        if fh is None:
            fh = self._comp[i] = tempfile.TemporaryFile(prefix="rundash-comp-")
        fh.seek(8 * k * self.n)
        fh.write(np.ascontiguousarray(row, dtype=np.complex64).tobytes())

    def compensated_row(self, i: int, k: int) -> np.ndarray | None:
        """Channel ``i``'s compensated vectors of order ``k`` (None: none were set)."""
        fh = self._comp.get(i)
        if fh is None:
            return None
        fh.seek(8 * k * self.n)
        return _read_array(fh, np.complex64, self.n)

    def close(self) -> None:
        for fh in [*self._files, *self._comp.values()]:
            fh.close()


def _read_array(fh, dtype, count: int) -> np.ndarray:
    """``count`` items of ``dtype`` from ``fh``'s position, as a writable array."""
    buf = bytearray(count * np.dtype(dtype).itemsize)
    fh.readinto(buf)
    return np.frombuffer(buf, dtype)


class _ProbeRows:
    """What the analysis reads of every probe, in one temporary file instead of memory:
    its 1X (or first order), the same compensated for slow roll, and its direct level,
    each of the run's blocks (20 bytes per block and probe). :meth:`rows` gives an
    indexable view per quantity (``view[i, 0, sel]`` like an array of shape
    (n_probes, 1, n_blocks), ``view[i]`` for the direct levels): each index reads that
    probe's row from the file."""

    _FIELDS = {"raw": (0, np.complex64), "comp": (8, np.complex64), "direct": (16, np.float32)}

    def __init__(self, n_probes: int, n: int):
        self.n_probes, self.n = n_probes, n
        self._fh = tempfile.TemporaryFile(prefix="rundash-rows-")

    def _offset(self, i: int, name: str) -> int:
        return 20 * self.n * i + self._FIELDS[name][0] * self.n

    def put(self, i: int, name: str, x) -> None:
        self._fh.seek(self._offset(i, name))
        self._fh.write(np.ascontiguousarray(x, dtype=self._FIELDS[name][1]).tobytes())

    def get(self, i: int, name: str) -> np.ndarray:
        self._fh.seek(self._offset(i, name))
        return _read_array(self._fh, self._FIELDS[name][1], self.n)

    def rows(self, name: str, with_order_axis: bool) -> "_RowView":
        return _RowView(self, name, with_order_axis)

    def close(self) -> None:
        self._fh.close()


class _Selected:
    """One quantity of some probes of :class:`_ProbeRows` as
    :class:`rundash.dsp.slowroll.VectorRows`: ``sel[r]`` reads probe ``probes[r]``'s row."""

    def __init__(self, rows: _ProbeRows, name: str, probes):
        self._rows, self._name, self._probes = rows, name, [int(i) for i in probes]

    def __len__(self) -> int:
        return len(self._probes)

    def __getitem__(self, r: int) -> np.ndarray:
        return self._rows.get(self._probes[r], self._name)


class _RowView:
    """One quantity of :class:`_ProbeRows`, indexed like an array."""

    def __init__(self, rows: _ProbeRows, name: str, with_order_axis: bool):
        self._rows, self._name, self._axis = rows, name, with_order_axis
        self.shape = (rows.n_probes, 1, rows.n) if with_order_axis else (rows.n_probes, rows.n)

    def __getitem__(self, key):
        key = key if isinstance(key, tuple) else (key,)
        i, rest = int(key[0]), key[1:]
        if self._axis and rest:
            if int(rest[0]) != 0:
                raise IndexError("one order is held")
            rest = rest[1:]
        x = self._rows.get(i, self._name)
        return x[rest] if rest else x


def _write_tracks(conn, run_id, probes, orders, is_prox, results: _Results, time_s, speed_rpm,
                 held: dict, casc_amp, casc_done, row_rpm, row_t, freq_hz) -> None:
    """The bulk of a run's results, in the writer's transaction: the old results cleared,
    tach events, the speed profile, every probe's vector tracks and cascade. ``held``
    hands over the tach ``edges``, the once-per-rev ``opr`` and the speed ``profile``;
    each is let go (taken out of ``held``) once written."""
    q.clear_results(conn, run_id)
    q.save_tach(conn, run_id, "edges", held.pop("edges"))
    opr = held.pop("opr")
    q.save_tach(conn, run_id, "once_per_rev", opr.times_s)
    rev_mid = 0.5 * (opr.times_s[:-1] + opr.times_s[1:])
    del opr
    profile = held.pop("profile")
    rpm = np.empty_like(rev_mid)
    for a in range(0, rev_mid.size, CONVERT_BLOCKS):  # the same values, small temporaries
        rpm[a:a + CONVERT_BLOCKS] = profile.rpm(rev_mid[a:a + CONVERT_BLOCKS])
    del profile
    q.save_speed_profile(conn, run_id, rev_mid, rpm)
    del rpm, rev_mid
    axes = q.save_block_axes(conn, run_id, time_s, speed_rpm)  # once, shared by every track
    amp, lag = np.empty(time_s.size, np.float32), np.empty(time_s.size, np.float32)
    for i, ch in enumerate(probes):  # one order of one channel held at a time
        afac = vector_amplitude_factor(ch.kind)
        level = results.level(i, ch.kind == "proximity")
        for k, order in enumerate(orders):
            for compensated in (False, True):
                if compensated and not is_prox[i]:
                    continue
                v = results.compensated_row(i, k) if compensated else None
                v = results.order_row(i, k) if v is None else v
                _amplitude_and_lag(v, afac, amp, lag)
                del v
                q.save_track(conn, run_id, ch.id, float(order), compensated,
                             axes, None, amp, lag, level)
        if casc_amp[i] is not None and casc_done.any():
            q.save_cascade(conn, run_id, ch.id, row_rpm[casc_done], row_t[casc_done],
                           freq_hz, casc_amp[i][casc_done])
        del level


#: Vectors converted to amplitude and phase lag at a time by :func:`_amplitude_and_lag`.
CONVERT_BLOCKS = 1 << 15


def _amplitude_and_lag(v, afac: float, amp: np.ndarray, lag: np.ndarray) -> None:
    """``afac |v|`` and the phase lag (degrees) of vectors ``v`` into the float32 arrays
    ``amp`` and ``lag``, computed in float64 and rounded once, :data:`CONVERT_BLOCKS` at a
    time (the same values as the whole track at once, without its float64 copies)."""
    for a in range(0, v.size, CONVERT_BLOCKS):
        c = v[a:a + CONVERT_BLOCKS].astype(np.complex128)
        amp[a:a + c.size] = afac * np.abs(c)
        lag[a:a + c.size] = lag_deg_from_phasor(c)


class _ResultWriter:
    """One write transaction of a run's results, held by a second thread: :meth:`start`
    writes the bulk (tracks, cascade) while the caller computes the findings, which
    :meth:`finish` adds before the commit and waits for; an error on either side rolls
    the whole transaction back (:meth:`abandoned_on_error`), so nothing half-written
    stays. The thread's seconds in the database are the 'save' stage (its wait for the
    findings is not)."""

    class _Abandoned(Exception):
        pass

    def __init__(self, db: Database, run_id: int, timer: StageTimer):
        self.db, self.run_id, self.timer = db, run_id, timer
        self._handed = threading.Event()
        self._last = None  # callable(conn) run before the commit; None: abandon
        self._error: BaseException | None = None
        self._thread: threading.Thread | None = None

    def start(self, bulk) -> None:
        ctx = contextvars.copy_context()  # the caller's lock-wait listener, if any
        self._thread = threading.Thread(target=ctx.run, args=(self._run, bulk),
                                        name="rundash-save", daemon=True)
        self._thread.start()

    def _run(self, bulk) -> None:
        t0, c0 = time.perf_counter(), time.thread_time()
        waited = 0.0
        try:
            with self.db.write() as conn:
                bulk(conn)
                w0 = time.perf_counter()
                self._handed.wait()
                waited = time.perf_counter() - w0
                if self._last is None:
                    raise self._Abandoned()
                self._last(conn)
        except self._Abandoned:
            pass
        except BaseException as exc:  # re-raised in the caller's thread by finish()
            self._error = exc
        finally:
            self.timer.add("save", time.perf_counter() - t0 - waited, time.thread_time() - c0)

    @contextmanager
    def abandoned_on_error(self):
        try:
            yield
        except BaseException:
            self._handed.set()  # no findings: the writer rolls back
            self._thread.join()
            raise

    def finish(self, last) -> None:
        """Hand over the last part, wait for the commit; the writer's error, if any."""
        self._last = last
        self._handed.set()
        self._thread.join()
        if self._error is not None:
            raise self._error


def process_run(db: Database, run_id: int, *, params: ProcessingParams | None = None,
                progress: Progress = no_progress) -> ProcessResult:
    """Process a stored run and replace its results in one transaction."""
    with ExitStack() as stack:  # closes the per-channel result files, whatever happens
        return _process(db, run_id, params, progress, stack)


def _process(db: Database, run_id: int, params: ProcessingParams | None, progress: Progress,
             stack: ExitStack) -> ProcessResult:
    t_start = time.perf_counter()
    params = params or ProcessingParams()
    timer = StageTimer()
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
    fs = tach_ch.sample_rate_hz

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        edges, span = _edges(db, tach_ch, desc, timer)
        with timer("tach"):
            opr = tach.once_per_rev(edges, desc.tach.pulses_per_rev)
            tq = tach.tach_quality(span, opr.times_s, tach_ch.sample_rate_hz)
        with timer("speed"):
            profile = speed.speed_profile(opr.times_s, jitter_floor_s=tq.jitter_floor_s)
            segments = speed.segment(profile)
            kind = speed.run_kind(segments)
    notes += [f"{w.category.__name__}: {w.message}" for w in caught]
    if profile.note:
        notes.append(profile.note)
    progress(1.0, "tach")
    _return_free_memory()

    # each probe's direct level only: p-p of a proximity probe, rms of the others (what
    # the findings judge and the tracks keep; the p-p alone saves two passes)
    tracker = dsp_orders.OrderTracker(
        profile, fs, len(probes), orders=params.orders, revs_per_block=params.revs_per_block,
        direct=["pp" if c.kind == "proximity" else "rms" for c in probes])
    with timer("cascade"):
        row_t, row_rpm = spectra.cascade_plan(profile, speed_step_rpm=params.cascade_speed_step_rpm,
                                              max_rows=params.cascade_max_rows)
    n_fft = params.cascade_n_fft or _n_fft(fs)
    f_max = min(fs / 2, params.cascade_max_order * float(np.max(row_rpm)) / 60.0 * 1.05)
    casc_amp: list[np.ndarray | None] = [None] * len(probes)
    casc_done = np.zeros(row_t.size, dtype=bool)
    row_first = np.round(row_t * fs).astype(np.int64) - n_fft // 2  # first sample of each row
    freq_hz = None
    results = _Results(len(probes), tracker.orders, profile.n_revs // tracker.revs_per_block)
    stack.callback(results.close)
    # velocity channels: the overall judged by the housing-velocity rules is band-limited
    vel = [i for i, c in enumerate(probes) if c.kind == "velocity"]
    band = overall.velocity_band(fs, rated_speed_rpm=desc.machine.rated_speed_rpm) if vel else None
    band_rms = overall.BandOverall(band, profile, fs, len(vel),
                                   revs_per_block=tracker.revs_per_block) \
        if band is not None and band.applied else None
    if band is not None and band.note:
        notes.append(band.note)
    tail = None
    total = max(tach_ch.n_samples, 1)
    for start, block in _prefetched(db, [c.id for c in probes], timer):
        with timer("tracking"):
            tr = tracker.feed(block, start)
            if tr.n_blocks:
                results.add(tr)
            if band_rms is not None:
                band_rms.feed(block[vel], start)
        with timer("cascade"):
            # cascade rows need n_fft samples around their time: the last n_fft samples of
            # the chunk before are kept, and joined to this chunk only where a row needs them
            n_tail = 0 if tail is None else tail.shape[1]
            buf_start = start - n_tail
            todo = np.flatnonzero(~casc_done & (row_first >= buf_start)
                                  & (row_first + n_fft <= start + block.shape[1]))
            if todo.size:  # only the samples the rows due here need, all probes at once
                a = int(row_first[todo].min()) - buf_start
                b = int(row_first[todo].max()) + n_fft - buf_start
                seg = (block[:, a - n_tail:b - n_tail] if a >= n_tail else
                       np.concatenate([tail[:, a:], block[:, :max(b - n_tail, 0)]], axis=1))
                done, freq_hz, amp = spectra.cascade_rows(
                    seg, fs, buf_start + a, row_t[todo], n_fft=n_fft,
                    f_max_hz=f_max, max_bins=params.cascade_max_bins)
                for i in range(len(probes)):
                    if casc_amp[i] is None:
                        casc_amp[i] = np.zeros((row_t.size, amp.shape[2]), np.float32)
                    casc_amp[i][todo[done]] = amp[i, done]
                casc_done[todo[done]] = True
            if block.shape[1] >= n_fft:
                tail = block[:, -n_fft:].copy()
            else:  # a chunk shorter than a window (the record's last): add to the tail
                tail = (block.copy() if tail is None
                        else np.concatenate([tail, block], axis=1)[:, -n_fft:])
        progress((start + block.shape[1]) / total, "order tracking")
    with timer("tracking"):
        tracker.finish()
    time_s, speed_rpm, rev_index = results.blocks()
    orders = results.orders
    n_blocks = int(time_s.size)
    if band_rms is not None:
        with timer("tracking"):
            for i, rms in zip(vel, band_rms.rms(rev_index // tracker.revs_per_block)):
                results.replace_rms(i, rms)
    if n_blocks < 3:
        raise DspError(f"run {run_id}: only {n_blocks} whole revolutions could be tracked")
    tracker_name = params.tracker or desc.processing.tracker or "order"
    if tracker_name not in TRACKERS:
        raise DspError(f"tracker {tracker_name!r}: expected one of {', '.join(TRACKERS)}")
    params = replace(params, tracker=tracker_name)
    if tracker_name == "vold-kalman":
        # the vectors at the block times from the Vold-Kalman filter of each whole channel
        # (one channel in memory at a time); direct levels and blocks stay the tracker's
        with db.read() as conn:
            for i, ch in enumerate(probes):
                x = np.empty(ch.n_samples, np.float32)
                for start, block in _timed_chunks(conn, [ch.id], timer):
                    x[start:start + block.shape[1]] = block[0]
                with timer("tracking"):
                    env = vold_kalman_at(x, fs, profile, orders, time_s,
                                         bandwidth_orders=VK_BANDWIDTH_ORDERS)
                    del x
                    ok = np.isfinite(env)
                    vec = results.channel(i)[0]
                    vec[ok] = env[ok]
                    results.set_vectors(i, vec)
                if not ok.all():
                    notes.append(f"{ch.probe_name}: the Vold-Kalman filter cannot honour its "
                                 f"bandwidth or settle at {np.count_nonzero(~ok.all(axis=0))} of "
                                 f"{ok.shape[1]} blocks (near the record's ends, or a speed too "
                                 f"low for the sample rate): the order tracker's vectors are "
                                 f"kept there")
                progress((i + 1) / len(probes), "Vold-Kalman filter")
    progress(1.0, "order tracking")
    _return_free_memory()

    with timer("findings"):
        # analysis reads one order of each channel (1X, else the first tracked) and one
        # direct level (p-p of proximity probes, rms of the others): a track of that order
        # alone, its direct level under both names
        k1 = np.flatnonzero(np.isclose(orders, 1.0))
        ka = int(k1[0]) if k1.size else 0
        rows = _ProbeRows(len(probes), n_blocks)
        stack.callback(rows.close)
        for i, ch in enumerate(probes):  # one row of one channel at a time
            rows.put(i, "raw", results.order_row(i, ka))
            rows.put(i, "direct", results.level(i, ch.kind == "proximity"))
        # slow-roll compensation: proximity probes only, never seismic channels
        is_prox = np.array([c.kind == "proximity" for c in probes])
        window = params.slow_roll_rpm or desc.processing.slow_roll_rpm
        slow_roll_basis = ("--slow-roll" if params.slow_roll_rpm else
                           "[processing] slow_roll_rpm of the machine description" if window
                           else "")
        if window is None and is_prox.any() and k1.size:
            raw1 = _Selected(rows, "raw", np.flatnonzero(is_prox))  # read a probe at a time
            choice = slowroll.choose_slow_roll_window(
                speed_rpm, raw1, first_critical_rpm=first_candidate_rpm(speed_rpm, raw1))
            window, slow_roll_basis = choice.window, choice.note
            if window is None:
                notes.append(choice.note)
        for i in range(len(probes)):  # compensated once, kept for the save
            if window is not None and is_prox[i]:
                for k in range(orders.size):  # an order at a time (its mean a pairwise sum)
                    vec = results.order_row(i, k)
                    sr = slowroll.slow_roll_vector(speed_rpm, vec, window)
                    comp = slowroll.compensate(vec, sr).astype(np.complex64, copy=False)
                    results.set_compensated_row(i, k, comp)
                    if k == ka:
                        rows.put(i, "comp", comp)
                    del vec, comp
            else:
                rows.put(i, "comp", rows.get(i, "raw"))

        direct = rows.rows("direct", False)
        track = dsp_orders.OrderTrack(
            time_s=time_s, speed_rpm=speed_rpm, orders=orders[ka:ka + 1],
            vectors=rows.rows("raw", True), direct_pp=direct, direct_rms=direct,
            rev_index=rev_index)

        result = ProcessResult(run_id=run_id, run_kind=kind, n_revs=opr.n_revs,
                               n_blocks=n_blocks, slow_roll_rpm=window, warnings=notes)

        tach_report = dict(
            pulses_per_rev=opr.pulses_per_rev, n_edges=int(edges.size), n_revs=opr.n_revs,
            n_missing_filled=opr.n_missing_filled, n_extra_removed=opr.n_extra_removed,
            repair_times_s=[round(float(t), 6) for t in opr.repair_times_s[:1000]],
            notes=list(opr.notes))
        seg_list = [dict(kind=s.kind, t_start_s=s.t_start_s, t_end_s=s.t_end_s,
                         rpm_start=s.rpm_start, rpm_end=s.rpm_end) for s in segments]

        def finish(conn) -> None:  # the findings' part of the transaction, before its commit
            q.save_processing(conn, run_id, version=__version__, params=params.to_dict(),
                              slow_roll_rpm=window, tach_report=tach_report,
                              segments=seg_list, warnings=notes)
            q.save_findings_json(conn, run_id, findings)
            q.save_finding_rows(conn, run_id, findings_mod.finding_rows(findings))
            q.update_run(conn, run_id, kind=kind)

        # the results are written in a second thread while the findings are computed here:
        # the database's work (SQLite, outside the interpreter lock) beside the analysis
        writer = _ResultWriter(db, run_id, timer)
        # the per-revolution arrays only the save needs (tach events, fitted times, the
        # speed profile's coefficients) go to the writer, which lets each go once it is
        # written: they are not held through the findings and modal fits
        held = dict(edges=edges, opr=opr, profile=profile)
        revs_per_block = tracker.revs_per_block
        del edges, opr, profile, tracker, band_rms
        writer.start(lambda conn: _write_tracks(
            conn, run_id, probes, orders, is_prox, results, time_s, speed_rpm, held,
            casc_amp, casc_done, row_rpm, row_t, freq_hz))
        with writer.abandoned_on_error():
            findings = findings_mod.build_findings(
                desc=desc, run=run, probes=probes, track=track,
                compensated=rows.rows("comp", True), segments=segments, slow_roll_rpm=window,
                processing_notes=notes, slow_roll_basis=slow_roll_basis,
                angle_bound_rad=tq.angle_bound_rad(speed_rpm),
                revs_per_block=revs_per_block, stage=timer,
                conjugate_part=tracker_name == "order", velocity_band=band)
            findings["processing"]["tracker"] = tracker_name
            result.findings = findings
        del track, direct

    progress(0.0, "saving")
    writer.finish(finish)
    progress(1.0, "saving")
    result.stage_s = timer.ordered()
    result.stage_cpu_s = timer.ordered_cpu()
    result.wall_s = time.perf_counter() - t_start
    return result
