"""Reads and appends of the review records (decisions, annotations, sign-offs) and the
run housekeeping writes (edit, delete).

Review rows are appended, never updated or deleted here (a run's deletion takes them with
it, by cascade). Each row has a ``uid`` that stays the same in every database, so
:mod:`rundash.storage.sync` can carry rows the other side lacks.
"""

from __future__ import annotations

import uuid
from datetime import datetime
from typing import Any, Sequence

from sqlalchemy import Connection, delete, func, insert, select

from rundash.errors import NotFoundError
from rundash.storage import orm
from rundash.storage.queries import C, PR, R, W

RD, SO = orm.ReviewDecision.__table__, orm.SignOff.__table__
REVIEW_TABLES = (RD, SO)


def new_uid() -> str:
    return uuid.uuid4().hex


def _row(r) -> dict[str, Any]:
    return {k: v for k, v in r._mapping.items() if k not in ("id", "run_id")}


def processing_time(conn: Connection, run_id: int) -> datetime | None:
    """The time of the run's current processing (its processing version), or None."""
    return conn.execute(select(PR.c.created_at).where(PR.c.run_id == run_id)).scalar()


def add_decision(conn: Connection, run_id: int, *, reviewer: str, action: str,
                 probe_name: str = "", direction: str = "",
                 target_speed_rpm: float | None = None, target_uid: str | None = None,
                 speed_rpm: float | None = None, af: float | None = None, reason: str = "",
                 plot: str = "", text: str = "", changed: dict[str, Any] | None = None,
                 processing_at: datetime | None = None) -> str:
    """Append one review entry; returns its uid."""
    uid = new_uid()
    conn.execute(insert(RD).values(
        uid=uid, run_id=run_id, created_at=orm.utcnow(), reviewer=reviewer, action=action,
        probe_name=probe_name, direction=direction, target_speed_rpm=target_speed_rpm,
        target_uid=target_uid, speed_rpm=speed_rpm, af=af, reason=reason, plot=plot,
        text=text, processing_at=processing_at, changed=changed or {}))
    return uid


def add_sign_off(conn: Connection, run_id: int, *, name: str, role: str, decision: str,
                 remarks: str, signed_on: str, processing_at: datetime | None,
                 snapshot: dict[str, Any]) -> str:
    """Append one sign-off; returns its uid."""
    uid = new_uid()
    conn.execute(insert(SO).values(
        uid=uid, run_id=run_id, created_at=orm.utcnow(), name=name, role=role,
        decision=decision, remarks=remarks, signed_on=signed_on, processing_at=processing_at,
        snapshot=snapshot))
    return uid


def load_decisions(conn: Connection, run_id: int) -> list[dict[str, Any]]:
    """A run's review entries, oldest first."""
    rows = conn.execute(select(RD).where(RD.c.run_id == run_id)
                        .order_by(RD.c.created_at, RD.c.id)).all()
    return [_row(r) for r in rows]


def load_sign_offs(conn: Connection, run_id: int) -> list[dict[str, Any]]:
    """A run's sign-offs, oldest first (the last one stands)."""
    rows = conn.execute(select(SO).where(SO.c.run_id == run_id)
                        .order_by(SO.c.created_at, SO.c.id)).all()
    return [_row(r) for r in rows]


def review_counts(conn: Connection, run_ids: Sequence[int]) -> dict[int, dict[str, Any]]:
    """Per run: ``n_entries`` (review entries) and ``signed_processing_at`` (the
    processing time of the latest sign-off; absent when none)."""
    ids = [int(r) for r in run_ids]
    out: dict[int, dict[str, Any]] = {i: {"n_entries": 0} for i in ids}
    if not ids:
        return out
    for rid, n in conn.execute(select(RD.c.run_id, func.count()).where(RD.c.run_id.in_(ids))
                               .group_by(RD.c.run_id)):
        out[rid]["n_entries"] = n
    for r in conn.execute(select(SO.c.run_id, SO.c.processing_at, SO.c.name, SO.c.decision)
                          .where(SO.c.run_id.in_(ids)).order_by(SO.c.created_at, SO.c.id)):
        out[r.run_id].update(signed_processing_at=r.processing_at, signed_by=r.name,
                             sign_off_decision=r.decision)
    return out


def copy_missing_review_rows(src: Connection, dst: Connection, src_run: int,
                             dst_run: int) -> int:
    """Append to ``dst_run`` every review row of ``src_run`` whose uid ``dst`` lacks;
    returns how many."""
    n = 0
    for t in REVIEW_TABLES:
        have = set(dst.execute(select(t.c.uid).where(t.c.run_id == dst_run)).scalars())
        cols = [c for c in t.c if c.name != "id"]
        rows = []
        for r in src.execute(select(*cols).where(t.c.run_id == src_run).order_by(t.c.id)):
            if r.uid in have:
                continue
            d = dict(r._mapping)
            d["run_id"] = dst_run
            rows.append(d)
        if rows:
            dst.execute(insert(t), rows)
            n += len(rows)
    return n


# ----------------------------------------------------------------------------- housekeeping
def delete_run(conn: Connection, run_id: int) -> dict[str, int]:
    """Delete a run with everything that hangs off it (channels, waveform chunks, results,
    live rows, review records: by the foreign keys' cascade); returns the rows counted
    before, by table."""
    if conn.execute(select(R.c.id).where(R.c.id == run_id)).scalar() is None:
        raise NotFoundError(f"no run with id {run_id}")
    counts = {}
    ch_ids = select(C.c.id).where(C.c.run_id == run_id).scalar_subquery()
    counts["waveform_chunk"] = conn.execute(select(func.count()).select_from(W).where(
        W.c.channel_id.in_(ch_ids))).scalar()
    for t in orm.Base.metadata.sorted_tables:
        if "run_id" in t.c:
            counts[t.name] = conn.execute(select(func.count()).select_from(t).where(
                t.c.run_id == run_id)).scalar()
    conn.execute(delete(W).where(W.c.channel_id.in_(ch_ids)))  # the bulk first, by index
    conn.execute(delete(R).where(R.c.id == run_id))
    return counts
