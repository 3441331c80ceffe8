"""Query and save functions. They take a connection from :class:`~rundash.storage.engine.
Database` (``db.read()`` / ``db.write()``) and return plain dataclasses or arrays: ORM
objects and SQL never leave this package.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from typing import Any, Iterator, Sequence

import numpy as np
from sqlalchemy import Connection, delete, func, insert, select, update

from rundash.errors import NotFoundError, StorageError
from rundash.model import (
    ChannelInfo, MachineDescription, MachineInfo, MachineSpec, ProbeSpec, RunInfo, TachSpec,
)
from rundash.storage import orm
from rundash.storage.codec import decode_f32, decode_f64, f32_view, f64_view
from rundash.storage.engine import lock_key

CHUNK_SAMPLES = 1 << 16

M, P, R, C, W = orm.Machine.__table__, orm.Probe.__table__, orm.Run.__table__, \
    orm.Channel.__table__, orm.WaveformChunk.__table__
T, PR, SP, V, CA, F = orm.TachPulses.__table__, orm.Processing.__table__, \
    orm.SpeedProfileRow.__table__, orm.VectorTrack.__table__, orm.CascadeRow.__table__, \
    orm.Finding.__table__
BA = orm.BlockAxes.__table__
#: derived results: what processing writes and replaces (:func:`clear_results`)
RESULT_TABLES = (T, PR, SP, BA, V, CA, F)
# the rows of vector_track that processing writes and replaces (the live monitor's stay)
PROCESSED = V.c.source == "processed"


# ----------------------------------------------------------------------------- machines
def upsert_machine(conn: Connection, desc: MachineDescription) -> tuple[int, dict[str, int]]:
    """Create the machine of a description, or bring an existing one up to date.

    Probes are matched by name; new ones are added, changed ones updated. Probes no longer
    named stay (older runs refer to them). Returns the machine id and probe ids by name.
    """
    m = desc.machine
    lock_key(conn, "machine:" + m.name)  # two first imports of one machine at once
    values = dict(
        kind=m.kind, rated_speed_rpm=m.rated_speed_rpm,
        min_operating_speed_rpm=m.min_operating_speed_rpm,
        max_continuous_speed_rpm=m.max_continuous_speed_rpm, trip_speed_rpm=m.trip_speed_rpm,
        profile=m.profile, rotation=m.rotation, description=m.description,
        tach_column=desc.tach.column, tach_pulses_per_rev=desc.tach.pulses_per_rev,
        tach_edge=desc.tach.edge, tach_threshold=desc.tach.threshold,
        tach_hysteresis=desc.tach.hysteresis, tach_angle_deg=desc.tach.angle_deg,
    )
    mid = conn.execute(select(M.c.id).where(M.c.name == m.name)).scalar()
    if mid is None:
        mid = conn.execute(insert(M).values(name=m.name, created_at=orm.utcnow(), **values)
                           ).inserted_primary_key[0]
    else:
        conn.execute(update(M).where(M.c.id == mid).values(**values))
    existing = dict(conn.execute(select(P.c.name, P.c.id).where(P.c.machine_id == mid)).all())
    ids: dict[str, int] = {}
    for p in desc.probes:
        pv = dict(column_name=p.column, kind=p.kind, units=p.units,
                  sensitivity_mv_per_unit=p.sensitivity_mv_per_unit, angle_deg=p.angle_deg,
                  bearing=p.bearing, axis=p.axis, pair_name=p.pair)
        if p.name in existing:
            conn.execute(update(P).where(P.c.id == existing[p.name]).values(**pv))
            ids[p.name] = existing[p.name]
        else:
            ids[p.name] = conn.execute(insert(P).values(machine_id=mid, name=p.name, **pv)
                                       ).inserted_primary_key[0]
    return mid, ids


def _machine_info(conn: Connection, row) -> MachineInfo:
    probes = conn.execute(select(P).where(P.c.machine_id == row.id).order_by(P.c.id)).all()
    spec = MachineSpec(
        name=row.name, kind=row.kind, rated_speed_rpm=row.rated_speed_rpm,
        min_operating_speed_rpm=row.min_operating_speed_rpm,
        max_continuous_speed_rpm=row.max_continuous_speed_rpm, trip_speed_rpm=row.trip_speed_rpm,
        profile=row.profile, rotation=row.rotation, description=row.description)
    tach = TachSpec(column=row.tach_column, pulses_per_rev=row.tach_pulses_per_rev,
                    edge=row.tach_edge, threshold=row.tach_threshold,
                    hysteresis=row.tach_hysteresis, angle_deg=row.tach_angle_deg)
    n_runs = conn.execute(select(func.count()).select_from(R).where(R.c.machine_id == row.id)
                          ).scalar()
    return MachineInfo(
        id=row.id, spec=spec, tach=tach, n_runs=n_runs,
        probes=tuple(ProbeSpec(name=p.name, column=p.column_name, kind=p.kind, units=p.units,
                               sensitivity_mv_per_unit=p.sensitivity_mv_per_unit,
                               angle_deg=p.angle_deg, bearing=p.bearing, axis=p.axis,
                               pair=p.pair_name) for p in probes))


def list_machines(conn: Connection) -> list[MachineInfo]:
    return [_machine_info(conn, r) for r in conn.execute(select(M).order_by(M.c.name)).all()]


def get_machine(conn: Connection, machine_id: int) -> MachineInfo:
    row = conn.execute(select(M).where(M.c.id == machine_id)).first()
    if row is None:
        raise NotFoundError(f"no machine with id {machine_id}")
    return _machine_info(conn, row)


# ----------------------------------------------------------------------------- runs
def find_run_by_hash(conn: Connection, sha256: str) -> int | None:
    """The first run imported from a file with this content hash, or None.

    In a write transaction the check holds a lock on the hash until commit (see
    :func:`~rundash.storage.engine.lock_key`), so two imports of one file at once cannot
    both find nothing and both store it.
    """
    if conn.get_execution_options().get("rundash_write"):
        lock_key(conn, "source:" + sha256)
    return conn.execute(select(R.c.id).where(R.c.source_sha256 == sha256)
                        .order_by(R.c.id)).scalar()


def create_run(conn: Connection, *, machine_id: int, kind: str, label: str, cycle: str,
               notes: str, started_at: datetime | None, source_name: str, source_sha256: str,
               sample_rate_hz: float, description_toml: str, state: str = "importing",
               test_kind: str = "field") -> int:
    return conn.execute(insert(R).values(
        machine_id=machine_id, kind=kind, test_kind=test_kind, label=label, cycle=cycle, notes=notes,
        started_at=started_at, source_name=source_name, source_sha256=source_sha256,
        state=state, sample_rate_hz=sample_rate_hz, description_toml=description_toml,
        warnings=[], imported_at=orm.utcnow())).inserted_primary_key[0]


def update_run(conn: Connection, run_id: int, **values: Any) -> None:
    conn.execute(update(R).where(R.c.id == run_id).values(**values))


def delete_empty_run(conn: Connection, run_id: int) -> bool:
    """Delete a run that holds no samples (with its channels and live rows, by cascade);
    returns whether it was deleted. A run with samples is never deleted here."""
    n = conn.execute(select(R.c.n_samples).where(R.c.id == run_id)).scalar()
    if n is None or n > 0:
        return False
    conn.execute(delete(R).where(R.c.id == run_id))
    return True


def add_channel(conn: Connection, *, run_id: int, position: int, name: str, role: str,
                probe_name: str | None, kind: str | None, unit: str, scale: float,
                sample_rate_hz: float) -> int:
    return conn.execute(insert(C).values(
        run_id=run_id, position=position, name=name, role=role, probe_name=probe_name,
        kind=kind, unit=unit, scale=scale, sample_rate_hz=sample_rate_hz, n_samples=0)
    ).inserted_primary_key[0]


def write_chunks(conn: Connection, rows: Sequence[tuple[int, int, int, np.ndarray]],
                 sample_rate_hz: float) -> None:
    """Insert waveform chunks: rows of (channel_id, chunk_index, start_index, samples)."""
    conn.execute(insert(W), [
        dict(channel_id=cid, chunk_index=ci, start_index=si, n_samples=int(x.size),
             sample_rate_hz=sample_rate_hz, data=f32_view(x)) for cid, ci, si, x in rows])


def set_run_sample_rate(conn: Connection, run_id: int, sample_rate_hz: float) -> None:
    """Set the sample rate of a run, its channels and their chunks (an import whose time
    column refined the rate after the first chunks were written)."""
    ids = select(C.c.id).where(C.c.run_id == run_id).scalar_subquery()
    conn.execute(update(R).where(R.c.id == run_id).values(sample_rate_hz=sample_rate_hz))
    conn.execute(update(C).where(C.c.run_id == run_id).values(sample_rate_hz=sample_rate_hz))
    conn.execute(update(W).where(W.c.channel_id.in_(ids)).values(
        sample_rate_hz=sample_rate_hz))


def set_channel_lengths(conn: Connection, lengths: dict[int, int]) -> None:
    for cid, n in lengths.items():
        conn.execute(update(C).where(C.c.id == cid).values(n_samples=n))


def _run_info(conn: Connection, row) -> RunInfo:
    n_ch = conn.execute(select(func.count()).select_from(C).where(C.c.run_id == row.id)).scalar()
    proc = conn.execute(select(PR.c.findings_json).where(PR.c.run_id == row.id)).first()
    verdict = None
    if proc is not None and proc.findings_json:
        verdict = proc.findings_json.get("run_verdict")
    return RunInfo(
        id=row.id, machine_name=row.machine_name, kind=row.kind, label=row.label,
        cycle=row.cycle, started_at=row.started_at, state=row.state, source_name=row.source_name,
        source_sha256=row.source_sha256, notes=row.notes, n_channels=n_ch,
        duration_s=row.n_samples / row.sample_rate_hz if row.sample_rate_hz else 0.0,
        processed=proc is not None, verdict=verdict, test_kind=row.test_kind or "field")


def _run_select():
    return select(R, M.c.name.label("machine_name")).join(M, M.c.id == R.c.machine_id)


def list_runs(conn: Connection, machine_id: int | None = None) -> list[RunInfo]:
    """Runs, newest first (by start time, then by id)."""
    q = _run_select()
    if machine_id is not None:
        q = q.where(R.c.machine_id == machine_id)
    q = q.order_by(R.c.started_at.desc().nulls_last(), R.c.id.desc())
    return [_run_info(conn, r) for r in conn.execute(q).all()]


def get_run(conn: Connection, run_id: int) -> RunInfo:
    row = conn.execute(_run_select().where(R.c.id == run_id)).first()
    if row is None:
        raise NotFoundError(f"no run with id {run_id}")
    return _run_info(conn, row)


def run_machine_id(conn: Connection, run_id: int) -> int:
    mid = conn.execute(select(R.c.machine_id).where(R.c.id == run_id)).scalar()
    if mid is None:
        raise NotFoundError(f"no run with id {run_id}")
    return mid


def run_description_toml(conn: Connection, run_id: int) -> str:
    return conn.execute(select(R.c.description_toml).where(R.c.id == run_id)).scalar() or ""


def list_channels(conn: Connection, run_id: int) -> list[ChannelInfo]:
    rows = conn.execute(select(C).where(C.c.run_id == run_id).order_by(C.c.position)).all()
    return [ChannelInfo(id=r.id, name=r.name, role=r.role, probe_name=r.probe_name, kind=r.kind,
                        unit=r.unit, sample_rate_hz=r.sample_rate_hz, n_samples=r.n_samples)
            for r in rows]


def read_channel(conn: Connection, channel_id: int, start: int = 0,
                 stop: int | None = None) -> np.ndarray:
    """Samples [start, stop) of one channel as float32."""
    q = select(W.c.start_index, W.c.data).where(W.c.channel_id == channel_id)
    if stop is not None:
        q = q.where(W.c.start_index < stop)
    q = q.where(W.c.start_index + W.c.n_samples > start).order_by(W.c.chunk_index)
    parts = []
    for si, data in conn.execute(q):
        x = decode_f32(data)
        lo = max(0, start - si)
        hi = x.size if stop is None else min(x.size, stop - si)
        parts.append(x[lo:hi])
    return np.concatenate(parts) if parts else np.empty(0, np.float32)


def iter_run_chunks(conn: Connection, channel_ids: Sequence[int]) -> Iterator[tuple[int, np.ndarray]]:
    """Yield ``(start_index, block)`` with block (n_channels, n) float32, chunk by chunk.

    All channels of a run share one time base and one chunking, so chunk k of every
    channel covers the same samples.
    """
    n_chunks = conn.execute(select(func.max(W.c.chunk_index)).where(
        W.c.channel_id == channel_ids[0])).scalar()
    if n_chunks is None:
        return
    for k in range(n_chunks + 1):
        rows = conn.execute(select(W.c.channel_id, W.c.start_index, W.c.data).where(
            W.c.channel_id.in_(channel_ids), W.c.chunk_index == k)).all()
        by_ch = {r.channel_id: r for r in rows}
        first = by_ch[channel_ids[0]]
        block = np.vstack([decode_f32(by_ch[c].data) for c in channel_ids])
        yield first.start_index, block


# ----------------------------------------------------------------------------- results
@dataclass(frozen=True)
class StoredTrack:
    """A stored vector track of one channel and order: a processed track, or the live
    monitor's batches up to ``last_seq`` joined (never compensated)."""

    channel_id: int
    probe_name: str
    kind: str
    order: float
    compensated: bool
    time_s: np.ndarray
    speed_rpm: np.ndarray
    amplitude: np.ndarray
    phase_lag_deg: np.ndarray
    direct: np.ndarray
    last_seq: int = 0


@dataclass(frozen=True)
class StoredCascade:
    channel_id: int
    probe_name: str
    speed_rpm: np.ndarray
    time_s: np.ndarray
    freq_hz: np.ndarray
    amplitude: np.ndarray


@dataclass(frozen=True)
class StoredProcessing:
    created_at: datetime
    rundash_version: str
    params: dict[str, Any]
    slow_roll_rpm: tuple[float, float] | None
    tach_report: dict[str, Any]
    segments: list[Any]
    warnings: list[Any]
    findings: dict[str, Any] | None


def clear_results(conn: Connection, run_id: int) -> None:
    """Delete every derived result of a run (inside the caller's transaction)."""
    for table in (F, V, CA, BA, SP, T, PR):
        rows = table.c.run_id == run_id
        conn.execute(delete(table).where(rows & PROCESSED if table is V else rows))


#: Blob values of at least this many bytes are written in place on SQLite (see
#: :func:`_insert_row`).
BLOB_IN_PLACE_BYTES = 1 << 20


def _insert_row(conn: Connection, table, **values) -> None:
    """Insert one row of ``table``. On SQLite, each blob value (a memoryview) of at least
    :data:`BLOB_IN_PLACE_BYTES` is inserted as zeros of its size and then written into
    the row in place by SQLite's incremental blob I/O, in the same transaction: bound
    to the insert, SQLite would copy the value and assemble the whole row in memory (a
    2-hour run's track holds 9 MB of blobs, its speed profile 12 MB)."""
    big = {}
    if conn.dialect.name == "sqlite":
        big = {k: v for k, v in values.items()
               if isinstance(v, memoryview) and v.nbytes >= BLOB_IN_PLACE_BYTES}
    row = {k: (func.zeroblob(v.nbytes) if k in big else v) for k, v in values.items()}
    res = conn.execute(insert(table).values(**row))
    if big:
        rowid = int(res.inserted_primary_key[0])  # the integer id is SQLite's rowid
        raw = conn.connection.driver_connection
        for k, v in big.items():
            with raw.blobopen(table.name, k, rowid) as blob:
                blob.write(v)


def save_tach(conn: Connection, run_id: int, kind: str, times_s: np.ndarray) -> None:
    conn.execute(delete(T).where(T.c.run_id == run_id, T.c.kind == kind))
    _insert_row(conn, T, run_id=run_id, kind=kind, n=int(len(times_s)), times=f64_view(times_s))


def load_tach(conn: Connection, run_id: int, kind: str = "once_per_rev") -> np.ndarray | None:
    b = conn.execute(select(T.c.times).where(T.c.run_id == run_id, T.c.kind == kind)).scalar()
    return None if b is None else decode_f64(b)


def save_processing(conn: Connection, run_id: int, *, version: str, params: dict[str, Any],
                    slow_roll_rpm: tuple[float, float] | None, tach_report: dict[str, Any],
                    segments: list[Any], warnings: list[Any]) -> None:
    conn.execute(insert(PR).values(
        run_id=run_id, created_at=orm.utcnow(), rundash_version=version, params=params,
        slow_roll_lo_rpm=None if slow_roll_rpm is None else slow_roll_rpm[0],
        slow_roll_hi_rpm=None if slow_roll_rpm is None else slow_roll_rpm[1],
        tach_report=tach_report, segments=segments, warnings=warnings, findings_json=None))


def save_findings_json(conn: Connection, run_id: int, findings: dict[str, Any]) -> None:
    conn.execute(update(PR).where(PR.c.run_id == run_id).values(findings_json=findings))


def load_processing(conn: Connection, run_id: int) -> StoredProcessing | None:
    r = conn.execute(select(PR).where(PR.c.run_id == run_id)).first()
    if r is None:
        return None
    sr = None if r.slow_roll_lo_rpm is None else (r.slow_roll_lo_rpm, r.slow_roll_hi_rpm)
    return StoredProcessing(created_at=r.created_at, rundash_version=r.rundash_version,
                            params=r.params, slow_roll_rpm=sr, tach_report=r.tach_report,
                            segments=r.segments, warnings=r.warnings, findings=r.findings_json)


def save_speed_profile(conn: Connection, run_id: int, time_s, speed_rpm) -> None:
    _insert_row(conn, SP, run_id=run_id, n=int(len(time_s)), time_s=f64_view(time_s),
                speed_rpm=f64_view(speed_rpm))


def load_speed_profile(conn: Connection, run_id: int) -> tuple[np.ndarray, np.ndarray] | None:
    r = conn.execute(select(SP.c.time_s, SP.c.speed_rpm).where(SP.c.run_id == run_id)).first()
    return None if r is None else (decode_f64(r.time_s), decode_f64(r.speed_rpm))


@dataclass(frozen=True)
class SharedAxes:
    """The run's block times and speeds, stored once (:func:`save_block_axes`): the
    tracks saved with it leave their own axes empty and read these."""

    n: int


def save_block_axes(conn: Connection, run_id: int, time_s, speed_rpm) -> SharedAxes:
    """Store the block times and speeds every processed track of the run shares (float64,
    written from views of the arrays, :func:`~rundash.storage.codec.f64_view`): once per
    run instead of once per track (two fifths of a 16-probe run's track bytes).
    Pass the result to :func:`save_track` as its ``time_s``."""
    if len(time_s) != len(speed_rpm):
        raise ValueError(f"{len(time_s)} block times but {len(speed_rpm)} speeds")
    conn.execute(delete(BA).where(BA.c.run_id == run_id))
    _insert_row(conn, BA, run_id=run_id, n=int(len(time_s)), time_s=f64_view(time_s),
                speed_rpm=f64_view(speed_rpm))
    return SharedAxes(int(len(time_s)))


def load_block_axes(conn: Connection, run_id: int) -> tuple[np.ndarray, np.ndarray] | None:
    """The run's shared block times and speeds (read-only arrays), None if not stored."""
    r = conn.execute(select(BA.c.time_s, BA.c.speed_rpm).where(BA.c.run_id == run_id)).first()
    return None if r is None else (decode_f64(r.time_s), decode_f64(r.speed_rpm))


def save_track(conn: Connection, run_id: int, channel_id: int, order: float, compensated: bool,
               time_s, speed_rpm, amplitude, phase_lag_deg, direct) -> None:
    """One vector track. Times and speeds are stored as float64; amplitude, phase lag and
    direct level as float32 (7 significant digits, finer than the float32 samples they
    come from; half the bytes to write and read). :func:`load_tracks` reads either.
    ``time_s`` may be the :class:`SharedAxes` of :func:`save_block_axes` (``speed_rpm``
    None): the track's own axes are then left empty."""
    if isinstance(time_s, SharedAxes):
        n, t_blob, s_blob = time_s.n, b"", b""
    else:
        n, t_blob, s_blob = int(len(time_s)), f64_view(time_s), f64_view(speed_rpm)
    if len(amplitude) != n:
        raise ValueError(f"a track of {len(amplitude)} vectors on an axis of {n} blocks")
    _insert_row(conn, V, run_id=run_id, channel_id=channel_id, order=float(order),
                compensated=compensated, source="processed", seq=0, n=n, time_s=t_blob,
                speed_rpm=s_blob, amplitude=f32_view(amplitude),
                phase_lag_deg=f32_view(phase_lag_deg), direct=f32_view(direct))


def _decode_n(b: bytes, n: int) -> np.ndarray:
    """``n`` values as float64 from a float32 or a float64 blob (told by its length)."""
    return decode_f32(b).astype(np.float64) if len(b) == 4 * n else decode_f64(b)


def load_tracks(conn: Connection, run_id: int, *, order: float | None = None,
                compensated: bool | None = None, probe_name: str | None = None
                ) -> list[StoredTrack]:
    q = select(V, C.c.probe_name, C.c.kind).join(C, C.c.id == V.c.channel_id).where(
        V.c.run_id == run_id, PROCESSED)
    if order is not None:
        q = q.where(V.c.order == float(order))
    if compensated is not None:
        q = q.where(V.c.compensated == compensated)
    if probe_name is not None:
        q = q.where(C.c.probe_name == probe_name)
    q = q.order_by(C.c.position, V.c.order, V.c.compensated)
    rows = conn.execute(q).all()
    shared = None  # the run's block axes, decoded once for all its tracks that share them
    out = []
    for r in rows:
        if len(r.time_s) == 0 and r.n > 0:
            shared = shared or load_block_axes(conn, run_id)
            if shared is None or shared[0].size != r.n:
                raise StorageError(f"run {run_id}: the track of channel {r.channel_id}, order "
                                   f"{r.order:g} has {r.n} vectors but the run's block axes "
                                   f"{'are missing' if shared is None else f'hold {shared[0].size}'}")
            t, s = shared
        else:
            t, s = decode_f64(r.time_s), decode_f64(r.speed_rpm)
        out.append(StoredTrack(channel_id=r.channel_id, probe_name=r.probe_name, kind=r.kind,
                               order=r.order, compensated=r.compensated, time_s=t, speed_rpm=s,
                               amplitude=_decode_n(r.amplitude, r.n),
                               phase_lag_deg=_decode_n(r.phase_lag_deg, r.n),
                               direct=_decode_n(r.direct, r.n)))
    return out


def save_cascade(conn: Connection, run_id: int, channel_id: int, speed_rpm, time_s, freq_hz,
                 amplitude) -> None:
    a = np.asarray(amplitude, dtype=np.float32)
    _insert_row(conn, CA, run_id=run_id, channel_id=channel_id, n_rows=a.shape[0],
                n_freq=a.shape[1], speed_rpm=f64_view(speed_rpm), time_s=f64_view(time_s),
                freq_hz=f64_view(freq_hz), amplitude=f32_view(a))


def load_cascades(conn: Connection, run_id: int) -> list[StoredCascade]:
    q = select(CA, C.c.probe_name).join(C, C.c.id == CA.c.channel_id).where(
        CA.c.run_id == run_id).order_by(C.c.position)
    out = []
    for r in conn.execute(q).all():
        out.append(StoredCascade(
            channel_id=r.channel_id, probe_name=r.probe_name, speed_rpm=decode_f64(r.speed_rpm),
            time_s=decode_f64(r.time_s), freq_hz=decode_f64(r.freq_hz),
            amplitude=decode_f32(r.amplitude).reshape(r.n_rows, r.n_freq)))
    return out


def save_finding_rows(conn: Connection, run_id: int, rows: Sequence[dict[str, Any]]) -> None:
    conn.execute(delete(F).where(F.c.run_id == run_id))
    if rows:
        conn.execute(insert(F), [dict(run_id=run_id, **r) for r in rows])


def load_finding_rows(conn: Connection, run_ids: Sequence[int]) -> list[dict[str, Any]]:
    """The critical-speed rows of the finding table of ``run_ids`` (run id, probe,
    direction, speed, classification, details: the findings JSON entry), by run and speed."""
    if not run_ids:
        return []
    rows = conn.execute(select(F.c.run_id, F.c.probe_name, F.c.direction, F.c.speed_rpm,
                               F.c.classification, F.c.details)
                        .where(F.c.run_id.in_([int(r) for r in run_ids]))
                        .order_by(F.c.run_id, F.c.speed_rpm)).all()
    return [dict(r._mapping) for r in rows]
