"""Copy machines, runs, waveforms and results from one database to another.

``sync(source, destination)`` brings every complete run of the source (or of one machine)
into the destination: a site laptop's SQLite file into the shared PostgreSQL store, or one
machine's history from the store onto a laptop to work offline. The rules:

- **Identity by content.** A run's content hash (:func:`run_content_hash`) covers its
  machine, the SHA-256 of the recorded file, its start time, sample rate, length and
  every channel's name, role, probe, unit, scale and length; waveform chunks are a
  deterministic function of those. A destination run of the same machine with the same
  content hash *is* the run: it is not copied again, so a second sync copies nothing.
- **Conflict**: a destination run of the same machine with the same *name* (label and
  start time) but other content is reported and left alone; nothing is overwritten.
- **Results** (tach events, speed profile, vectors, cascades, findings) travel with the
  run. When both sides hold the run, the destination's results are replaced only when the
  source's were made later (``processing.created_at``); otherwise they are kept.
- **Review records** (decisions, annotations, sign-offs: appended rows, each with a
  uid that is the same in every database) travel with the run; when both sides hold the
  run, the rows one side lacks are added, so a review made on a laptop reaches the store
  and the other way round. Nothing of a review is ever overwritten or removed.
- **One transaction per run**: a run lands whole, with all its chunks and results, or
  not at all. A sync stopped midway (Ctrl-C, a kill, a lost connection) leaves whole runs
  only; running it again skips those and copies the rest.

Two syncs into one destination at once are safe: the per-run check is repeated inside
the write transaction under a lock on the content hash (:func:`~rundash.storage.engine.
lock_key`; SQLite's write transactions are serial anyway).

Machines are matched by name; a machine missing in the destination is created with its
probes, missing probes are added, and a machine whose description differs is kept as the
destination has it and named in the report (each run carries the description it was
imported with, which processing uses).
"""

from __future__ import annotations

import hashlib
import json
import time
from dataclasses import dataclass, field
from typing import Any, Callable, Literal

from sqlalchemy import Connection, Table, func, insert, select

from rundash.errors import NotFoundError, StorageError
from rundash.progress import Progress, no_progress
from rundash.storage import orm
from rundash.storage import queries as q
from rundash.storage import review_queries as rq
from rundash.storage.engine import Database, lock_key

M, P, R, C, W = q.M, q.P, q.R, q.C, q.W
PR = q.PR
# derived results: what processing replaces (the tables queries.clear_results empties)
RESULT_TABLES: tuple[Table, ...] = q.RESULT_TABLES
# the machine columns compared to tell whether two databases describe a machine alike
_MACHINE_COLS = [c.name for c in M.c if c.name not in ("id", "created_at")]
_PROBE_COLS = [c.name for c in P.c if c.name not in ("id", "machine_id")]
CHUNK_BATCH_BYTES = 32 << 20  # waveform bytes per insert batch

Action = Literal["copied", "results updated", "skipped", "conflict", "not complete"]


def _run_child_tables() -> tuple[Table, ...]:
    """Every table that hangs off a run (besides channels and chunks), in FK order."""
    out = []
    for t in orm.Base.metadata.sorted_tables:
        if t is C or t is W or t is R or "run_id" not in t.c:
            continue
        out.append(t)
    return tuple(out)


@dataclass(frozen=True)
class RunOutcome:
    """What the sync did with one source run."""

    action: Action
    machine: str
    label: str
    source_run_id: int
    destination_run_id: int | None
    reason: str
    n_chunks: int = 0
    n_bytes: int = 0
    n_review: int = 0

    def line(self) -> str:
        where = f" -> run {self.destination_run_id}" if self.destination_run_id else ""
        return (f"{self.action:<15} run {self.source_run_id}{where}  {self.machine} / "
                f"{self.label}: {self.reason}")


@dataclass
class SyncReport:
    """The outcome of a sync: one :class:`RunOutcome` per source run considered."""

    source: str
    destination: str
    machines_created: list[str] = field(default_factory=list)
    machines_differing: list[str] = field(default_factory=list)
    probes_added: list[str] = field(default_factory=list)
    runs: list[RunOutcome] = field(default_factory=list)
    elapsed_s: float = 0.0

    def count(self, action: Action) -> int:
        return sum(1 for r in self.runs if r.action == action)

    @property
    def n_bytes(self) -> int:
        return sum(r.n_bytes for r in self.runs)

    @property
    def n_chunks(self) -> int:
        return sum(r.n_chunks for r in self.runs)

    def summary(self) -> str:
        mb = self.n_bytes / 1e6
        rate = f", {mb / self.elapsed_s:.1f} MB/s" if self.elapsed_s > 0 and mb else ""
        return (f"{self.count('copied')} copied, {self.count('results updated')} with results "
                f"updated, {self.count('skipped')} skipped (already there), "
                f"{self.count('conflict')} in conflict, {self.count('not complete')} not "
                f"complete; {sum(r.n_review for r in self.runs)} review records carried; "
                f"{self.n_chunks} waveform chunks, {mb:.1f} MB in "
                f"{self.elapsed_s:.1f} s{rate}")

    def to_dict(self) -> dict[str, Any]:
        return dict(source=self.source, destination=self.destination,
                    machines_created=self.machines_created,
                    machines_differing=self.machines_differing, probes_added=self.probes_added,
                    runs=[r.__dict__ for r in self.runs], n_bytes=self.n_bytes,
                    n_chunks=self.n_chunks, elapsed_s=round(self.elapsed_s, 3),
                    counts={a: self.count(a) for a in ("copied", "results updated", "skipped",
                                                       "conflict", "not complete")})


# ----------------------------------------------------------------------------- identity
def _content_payload(machine: str, run, channels) -> str:
    started = run.started_at.isoformat() if run.started_at else None
    return json.dumps(dict(
        machine=machine, source_sha256=run.source_sha256, started_at=started,
        sample_rate_hz=float(run.sample_rate_hz).hex(), n_samples=int(run.n_samples),
        channels=[[c.position, c.name, c.role, c.probe_name, c.kind, c.unit,
                   float(c.scale).hex(), float(c.sample_rate_hz).hex(), int(c.n_samples)]
                  for c in channels]), sort_keys=True)


def run_content_hash(conn: Connection, run_id: int) -> str:
    """SHA-256 identifying a stored run's recorded content, the same in every database."""
    row = conn.execute(select(R, M.c.name.label("machine_name")).join(M, M.c.id == R.c.machine_id)
                       .where(R.c.id == run_id)).first()
    if row is None:
        raise NotFoundError(f"no run with id {run_id}")
    chans = conn.execute(select(C).where(C.c.run_id == run_id).order_by(C.c.position)).all()
    return hashlib.sha256(_content_payload(row.machine_name, row, chans).encode()).hexdigest()


def _machine_index(conn: Connection, machine_id: int, name: str):
    """Content hash -> run id, and run name -> run id, of one machine's runs."""
    runs = conn.execute(select(R).where(R.c.machine_id == machine_id).order_by(R.c.id)).all()
    chans: dict[int, list] = {}
    for c in conn.execute(select(C).join(R, R.c.id == C.c.run_id).where(
            R.c.machine_id == machine_id).order_by(C.c.run_id, C.c.position)):
        chans.setdefault(c.run_id, []).append(c)
    by_hash: dict[str, int] = {}
    by_name: dict[tuple, int] = {}
    for r in runs:
        h = hashlib.sha256(_content_payload(name, r, chans.get(r.id, [])).encode()).hexdigest()
        by_hash.setdefault(h, r.id)
        by_name.setdefault(_run_name(r), r.id)
    return by_hash, by_name


def _run_name(r) -> tuple:
    return (r.label, r.started_at.isoformat() if r.started_at else None)


def _results_stamp(conn: Connection, run_id: int):
    return conn.execute(select(PR.c.created_at).where(PR.c.run_id == run_id)).scalar()


# ----------------------------------------------------------------------------- machines
def _ensure_machine(src: Connection, dst: Connection, src_mid: int, report: SyncReport) -> int:
    m = src.execute(select(M).where(M.c.id == src_mid)).first()
    lock_key(dst, "machine:" + m.name)
    d = dst.execute(select(M).where(M.c.name == m.name)).first()
    values = {k: getattr(m, k) for k in _MACHINE_COLS}
    if d is None:
        mid = dst.execute(insert(M).values(created_at=m.created_at, **values)
                          ).inserted_primary_key[0]
        report.machines_created.append(m.name)
    else:
        mid = d.id
        if any(getattr(d, k) != v for k, v in values.items()):
            report.machines_differing.append(m.name)
    have = set(dst.execute(select(P.c.name).where(P.c.machine_id == mid)).scalars())
    for p in src.execute(select(P).where(P.c.machine_id == src_mid).order_by(P.c.id)):
        if p.name not in have:
            dst.execute(insert(P).values(machine_id=mid, **{k: getattr(p, k) for k in _PROBE_COLS}))
            if d is not None:
                report.probes_added.append(f"{m.name} / {p.name}")
    return mid


# ----------------------------------------------------------------------------- copying
def _copy_rows(src: Connection, dst: Connection, table: Table, src_run: int, dst_run: int,
               channel_map: dict[int, int], dst_run_id_in_json: bool = False,
               results_only: bool = False) -> None:
    cols = [c for c in table.c if c.name != "id"]
    where = table.c.run_id == src_run
    if results_only and table is q.V:  # the live monitor's vectors are not results
        where = where & q.PROCESSED
    rows = []
    for r in src.execute(select(*cols).where(where).order_by(table.c.id)):
        d = dict(r._mapping)
        d["run_id"] = dst_run
        if "channel_id" in d:
            d["channel_id"] = channel_map[d["channel_id"]]
        if dst_run_id_in_json and isinstance(d.get("findings_json"), dict):
            fj = d["findings_json"]
            if isinstance(fj.get("run"), dict) and "id" in fj["run"]:
                fj = dict(fj, run=dict(fj["run"], id=dst_run))
            d["findings_json"] = fj
        rows.append(d)
    if rows:
        dst.execute(insert(table), rows)


def _copy_chunks(src: Connection, dst: Connection, src_channels, channel_map, progress_step
                 ) -> tuple[int, int]:
    n_chunks = n_bytes = 0
    batch: list[dict] = []
    batch_bytes = 0
    ids = [c.id for c in src_channels]
    stmt = (select(W.c.channel_id, W.c.chunk_index, W.c.start_index, W.c.n_samples,
                   W.c.sample_rate_hz, W.c.data)
            .where(W.c.channel_id.in_(ids)).order_by(W.c.channel_id, W.c.chunk_index)
            .execution_options(yield_per=64))
    for r in src.execute(stmt):
        batch.append(dict(channel_id=channel_map[r.channel_id], chunk_index=r.chunk_index,
                          start_index=r.start_index, n_samples=r.n_samples,
                          sample_rate_hz=r.sample_rate_hz, data=r.data))
        batch_bytes += len(r.data)
        if batch_bytes >= CHUNK_BATCH_BYTES:
            dst.execute(insert(W), batch)
            n_chunks += len(batch)
            n_bytes += batch_bytes
            progress_step(batch_bytes)
            batch, batch_bytes = [], 0
    if batch:
        dst.execute(insert(W), batch)
        n_chunks += len(batch)
        n_bytes += batch_bytes
        progress_step(batch_bytes)
    return n_chunks, n_bytes


def _copy_run(src: Connection, dst: Connection, src_run, dst_mid: int, progress_step
              ) -> tuple[int, int, int]:
    run_cols = [c.name for c in R.c if c.name not in ("id", "machine_id")]
    dst_run = dst.execute(insert(R).values(machine_id=dst_mid,
                                           **{k: getattr(src_run, k) for k in run_cols})
                          ).inserted_primary_key[0]
    chans = src.execute(select(C).where(C.c.run_id == src_run.id).order_by(C.c.position)).all()
    ch_cols = [c.name for c in C.c if c.name not in ("id", "run_id")]
    channel_map = {}
    for c in chans:
        channel_map[c.id] = dst.execute(insert(C).values(
            run_id=dst_run, **{k: getattr(c, k) for k in ch_cols})).inserted_primary_key[0]
    n_chunks, n_bytes = _copy_chunks(src, dst, chans, channel_map, progress_step)
    for t in _run_child_tables():
        _copy_rows(src, dst, t, src_run.id, dst_run, channel_map, dst_run_id_in_json=t is PR)
    return dst_run, n_chunks, n_bytes


def _replace_results(src: Connection, dst: Connection, src_run: int, dst_run: int) -> None:
    src_pos = dict(src.execute(select(C.c.id, C.c.position).where(C.c.run_id == src_run)).all())
    dst_by_pos = dict(dst.execute(select(C.c.position, C.c.id).where(C.c.run_id == dst_run)).all())
    channel_map = {cid: dst_by_pos[pos] for cid, pos in src_pos.items()}
    q.clear_results(dst, dst_run)
    for t in _run_child_tables():
        if t in RESULT_TABLES:
            _copy_rows(src, dst, t, src_run, dst_run, channel_map, dst_run_id_in_json=t is PR,
                       results_only=True)
    kind = src.execute(select(R.c.kind).where(R.c.id == src_run)).scalar()
    q.update_run(dst, dst_run, kind=kind)


# ----------------------------------------------------------------------------- sync
def sync(source: Database, destination: Database, *, machine: str | None = None,
         progress: Progress = no_progress, log: Callable[[str], None] | None = None
         ) -> SyncReport:
    """Copy every complete run of ``source`` (or of the machine named ``machine``) that
    ``destination`` does not hold yet, with its machine, probes, waveforms and results.

    Returns a :class:`SyncReport`; ``log`` (if given) receives one line per run as it is
    decided, before the next run starts. See the module docstring for the rules.
    """
    if source.url == destination.url:
        raise StorageError("source and destination of a sync are the same database")
    t0 = time.monotonic()
    report = SyncReport(source=_shown(source), destination=_shown(destination))
    with source.read() as src:
        mq = select(M.c.id, M.c.name).order_by(M.c.name)
        if machine is not None:
            mq = mq.where(M.c.name == machine)
        machines = src.execute(mq).all()
        if machine is not None and not machines:
            raise NotFoundError(f"no machine named {machine!r} in {report.source}")
        plan = []
        for mid, name in machines:
            for r in src.execute(select(R).where(R.c.machine_id == mid).order_by(R.c.id)):
                n_bytes = src.execute(select(func.coalesce(func.sum(C.c.n_samples), 0)).where(
                    C.c.run_id == r.id)).scalar() * 4
                plan.append((mid, name, r.id, int(n_bytes)))
    total = max(sum(p[3] for p in plan), 1)
    done = [0]

    def step(nbytes: int) -> None:
        done[0] += nbytes
        progress(min(done[0] / total, 1.0), "sync")

    dst_machine: dict[int, int] = {}
    indexes: dict[int, tuple[dict, dict]] = {}
    progress(0.0, "sync")
    for src_mid, name, src_run_id, n_bytes in plan:
        with source.read() as src:
            if src_mid not in dst_machine:
                with destination.write() as dst:
                    dst_machine[src_mid] = _ensure_machine(src, dst, src_mid, report)
                with destination.read() as dst:
                    indexes[src_mid] = _machine_index(dst, dst_machine[src_mid], name)
            outcome = _sync_run(src, destination, src_run_id, name, dst_machine[src_mid],
                                indexes[src_mid], step)
        if outcome.action not in ("copied",):
            step(n_bytes)
        report.runs.append(outcome)
        if log is not None:
            log(outcome.line())
    progress(1.0, "sync")
    report.elapsed_s = time.monotonic() - t0
    return report


def _sync_run(src: Connection, destination: Database, run_id: int, machine: str, dst_mid: int,
              index: tuple[dict, dict], step) -> RunOutcome:
    by_hash, by_name = index
    r = src.execute(select(R).where(R.c.id == run_id)).first()
    if r.state != "complete":
        return RunOutcome("not complete", machine, r.label, run_id, None,
                          f"state {r.state!r} in the source; only complete runs are copied")
    h = run_content_hash(src, run_id)
    with destination.write() as dst:
        lock_key(dst, "sync-run:" + h)
        existing = by_hash.get(h)
        if existing is None:  # someone else may have copied it since the index was read
            for cand in dst.execute(select(R.c.id).where(
                    R.c.machine_id == dst_mid, R.c.source_sha256 == r.source_sha256)).scalars():
                if run_content_hash(dst, cand) == h:
                    existing = cand
                    break
        if existing is not None:
            by_hash[h] = existing
            src_stamp = _results_stamp(src, run_id)
            dst_stamp = _results_stamp(dst, existing)
            n_rev = rq.copy_missing_review_rows(src, dst, run_id, existing)
            said = f"; {n_rev} review records added" if n_rev else ""
            if src_stamp is not None and (dst_stamp is None or src_stamp > dst_stamp):
                _replace_results(src, dst, run_id, existing)
                why = ("results copied (the destination had none)" if dst_stamp is None else
                       f"results of {src_stamp:%Y-%m-%d %H:%M:%S} replace those of "
                       f"{dst_stamp:%Y-%m-%d %H:%M:%S}")
                return RunOutcome("results updated", machine, r.label, run_id, existing,
                                  why + said, n_review=n_rev)
            why = "same content already there" + (
                "" if src_stamp is None or src_stamp == dst_stamp else
                "; the destination's results are newer, kept") + said
            return RunOutcome("skipped", machine, r.label, run_id, existing, why,
                              n_review=n_rev)
        clash = by_name.get(_run_name(r))
        if clash is not None:
            return RunOutcome(
                "conflict", machine, r.label, run_id, clash,
                f"destination run {clash} has the same name (label {r.label!r}, start "
                f"{r.started_at.isoformat() if r.started_at else 'not given'}) but other "
                "content; neither was changed")
        new_id, n_chunks, n_bytes = _copy_run(src, dst, r, dst_mid, step)
        n_rev = len(rq.load_decisions(dst, new_id)) + len(rq.load_sign_offs(dst, new_id))
    by_hash[h] = new_id
    by_name.setdefault(_run_name(r), new_id)
    return RunOutcome("copied", machine, r.label, run_id, new_id,
                      f"{n_chunks} chunks, {n_bytes / 1e6:.1f} MB"
                      + (f", {n_rev} review records" if n_rev else ""), n_chunks, n_bytes,
                      n_review=n_rev)


def _shown(db: Database) -> str:
    return db.engine.url.render_as_string(hide_password=True)
