"""Read and save functions of the live monitor: the recorder's status row, the vectors
found while a run is recorded (appended batch by batch) and the run's event log.

Like :mod:`rundash.storage.queries`, every function takes a connection from
``db.read()`` / ``db.write()`` and returns plain dataclasses or arrays. Writers keep
their transactions short (one batch each) so readers in WAL mode never wait long and
never see a half-written batch.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from typing import Any, Sequence

import numpy as np
from sqlalchemy import Connection, insert, select, update

from rundash.storage import orm
from rundash.storage.codec import decode_f64, encode_f64
from rundash.storage.queries import StoredTrack

LS, LE = orm.LiveStatus.__table__, orm.LiveEvent.__table__
LV = orm.VectorTrack.__table__  # one vector store: the live monitor's rows are source 'live'
LIVE = LV.c.source == "live"
C = orm.Channel.__table__


@dataclass(frozen=True)
class LiveStatusInfo:
    """The latest status of a recorded run. Speeds in rpm, times in s of record time."""

    run_id: int
    state: str
    updated_at: datetime
    time_s: float
    n_samples: int
    speed_rpm: float | None
    accel_rpm_s: float | None
    tach_ok: bool
    n_revs: int
    message: str


@dataclass(frozen=True)
class LiveEventInfo:
    id: int
    time_s: float
    speed_rpm: float | None
    kind: str
    severity: str
    message: str
    details: dict[str, Any]


def save_status(conn: Connection, run_id: int, *, state: str, time_s: float, n_samples: int,
                speed_rpm: float | None, accel_rpm_s: float | None, tach_ok: bool,
                n_revs: int, message: str = "") -> None:
    """Insert or replace the status row of a run."""
    values = dict(state=state, updated_at=orm.utcnow(), time_s=float(time_s),
                  n_samples=int(n_samples),
                  speed_rpm=None if speed_rpm is None else float(speed_rpm),
                  accel_rpm_s=None if accel_rpm_s is None else float(accel_rpm_s),
                  tach_ok=bool(tach_ok), n_revs=int(n_revs), message=message)
    done = conn.execute(update(LS).where(LS.c.run_id == run_id).values(**values)).rowcount
    if not done:
        conn.execute(insert(LS).values(run_id=run_id, **values))


def load_status(conn: Connection, run_id: int) -> LiveStatusInfo | None:
    r = conn.execute(select(LS).where(LS.c.run_id == run_id)).first()
    if r is None:
        return None
    return LiveStatusInfo(run_id=r.run_id, state=r.state, updated_at=r.updated_at,
                          time_s=r.time_s, n_samples=r.n_samples, speed_rpm=r.speed_rpm,
                          accel_rpm_s=r.accel_rpm_s, tach_ok=r.tach_ok, n_revs=r.n_revs,
                          message=r.message)


def latest_live_run(conn: Connection) -> int | None:
    """The run whose status was updated last (the one being recorded, if any)."""
    return conn.execute(select(LS.c.run_id).order_by(LS.c.updated_at.desc(), LS.c.id.desc())
                        .limit(1)).scalar()


def save_vectors(conn: Connection, run_id: int, seq: int,
                 rows: Sequence[tuple[int, float, Any, Any, Any, Any, Any]]) -> None:
    """Append one batch: rows of (channel_id, order, time_s, speed_rpm, amplitude,
    phase_lag_deg, direct), arrays of equal length."""
    if not rows:
        return
    conn.execute(insert(LV), [
        dict(run_id=run_id, channel_id=cid, order=float(o), compensated=False, source="live",
             seq=int(seq), n=int(len(t)),
             time_s=encode_f64(t), speed_rpm=encode_f64(s), amplitude=encode_f64(a),
             phase_lag_deg=encode_f64(p), direct=encode_f64(d))
        for cid, o, t, s, a, p, d in rows])


def load_live_tracks(conn: Connection, run_id: int, *, order: float | None = None,
                     after_seq: int = -1) -> list[StoredTrack]:
    """Live vectors of a run (batches after ``after_seq``), joined per channel and order,
    in block order."""
    q = (select(LV, C.c.probe_name, C.c.kind, C.c.position).join(C, C.c.id == LV.c.channel_id)
         .where(LV.c.run_id == run_id, LIVE, LV.c.seq > after_seq))
    if order is not None:
        q = q.where(LV.c.order == float(order))
    q = q.order_by(C.c.position, LV.c.order, LV.c.seq)
    groups: dict[tuple[int, float], list] = {}
    meta: dict[tuple[int, float], tuple[str, str]] = {}
    for r in conn.execute(q).all():
        key = (r.channel_id, r.order)
        groups.setdefault(key, []).append(r)
        meta[key] = (r.probe_name, r.kind)
    out = []
    for key, rs in groups.items():
        def cat(col):
            return np.concatenate([decode_f64(getattr(r, col)) for r in rs])
        out.append(StoredTrack(
            channel_id=key[0], probe_name=meta[key][0], kind=meta[key][1], order=key[1],
            compensated=False, last_seq=rs[-1].seq, time_s=cat("time_s"),
            speed_rpm=cat("speed_rpm"), amplitude=cat("amplitude"),
            phase_lag_deg=cat("phase_lag_deg"), direct=cat("direct")))
    return out


def save_events(conn: Connection, run_id: int, events: Sequence[dict[str, Any]]) -> None:
    """Append events: dicts with time_s, speed_rpm, kind, severity, message, details."""
    if events:
        conn.execute(insert(LE), [dict(run_id=run_id, created_at=orm.utcnow(), **e)
                                  for e in events])


def load_events(conn: Connection, run_id: int, *, after_id: int = 0) -> list[LiveEventInfo]:
    q = select(LE).where(LE.c.run_id == run_id, LE.c.id > after_id).order_by(LE.c.id)
    return [LiveEventInfo(id=r.id, time_s=r.time_s, speed_rpm=r.speed_rpm, kind=r.kind,
                          severity=r.severity, message=r.message, details=r.details or {})
            for r in conn.execute(q).all()]
