"""rundash from Python: notebooks and scripts.

>>> import rundash
>>> db = rundash.open("rundash-demo.sqlite")            # doctest: +SKIP
>>> db.runs()                                           # doctest: +SKIP
>>> run = db.run(1)                                     # doctest: +SKIP
>>> run.vectors(order=1).head()                         # doctest: +SKIP
>>> run.findings().verdict                              # doctest: +SKIP

:func:`open` gives a :class:`RunDatabase`; :meth:`RunDatabase.run` a :class:`Run` with
its tables (:meth:`Run.vectors`, :meth:`Run.speed`, :meth:`Run.cascade`) and its
:class:`Findings`; :func:`import_file`, :func:`process` and :func:`compare` do what the
commands of the same names do. Tables are :class:`pandas.DataFrame` with the columns of
the exports (README, "Exports"). Every error is a :class:`rundash.errors.RundashError`
(the value errors are also :class:`ValueError`). Verdicts are advisory:
:data:`rundash.CAUTION`.
"""

from __future__ import annotations

import contextlib
import json
import sys
import warnings
from datetime import datetime
from pathlib import Path
from typing import Any, Callable, Mapping, Sequence

import pandas as pd

from rundash import CAUTION
from rundash.errors import NotFoundError, RundashWarning
from rundash.storage import queries as q
from rundash.storage.engine import Database, open_database
from rundash.workflows import export as ex

__all__ = ["open", "import_file", "process", "compare", "RunDatabase", "Run", "Findings",
           "Comparison"]


def _stderr(line: str) -> None:
    print(line, file=sys.stderr)


def open(path_or_url: str | Path, create: bool = False, *, upgrade: bool = True,
         log: Callable[[str], None] | None = _stderr) -> RunDatabase:
    """Open a rundash database: a SQLite file path or a SQLAlchemy URL.

    Parameters
    ----------
    path_or_url : str or Path
        The database.
    create : bool
        Make a new database file when there is none. Without it a missing file is a
        :class:`~rundash.errors.NoDatabaseError` (a typo never leaves an empty database).
    upgrade : bool
        A database of an older rundash schema is migrated in place (``log`` is told
        ``upgrading the database schema of … from revision 'A' to 'B'`` first; copy the
        file beforehand to keep the old one). ``upgrade=False`` declines: the database is
        left as it is and opening raises :class:`~rundash.errors.StorageError` saying so.
    log : callable or None
        Told in one line what opening changes; standard error by default.
    """
    return RunDatabase(open_database(str(path_or_url), create=create, upgrade=upgrade,
                                     log=log))


def _database(db: RunDatabase | str | Path, *, create: bool = False) -> RunDatabase:
    return db if isinstance(db, RunDatabase) else open(db, create=create)


@contextlib.contextmanager
def _using(db: RunDatabase | str | Path):
    """The database of a call that returns plain results: one given by path or URL is
    opened for the call and closed after it; a :class:`RunDatabase` stays open."""
    rdb = _database(db)
    try:
        yield rdb
    finally:
        if rdb is not db:
            rdb.close()


class RunDatabase:
    """A rundash database (:func:`open`). Close it with :meth:`close` or a ``with`` block."""

    def __init__(self, database: Database) -> None:
        self.database = database

    @property
    def url(self) -> str:
        return self.database.url

    def __repr__(self) -> str:
        return f"<rundash database {self.database.url}>"

    def __enter__(self) -> RunDatabase:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def close(self) -> None:
        self.database.dispose()

    def machines(self) -> pd.DataFrame:
        """One row per machine: ``id``, ``name``, ``kind``, the speeds in rpm, ``profile``,
        ``rotation``, ``n_probes``, ``n_runs``."""
        with self.database.read() as conn:
            ms = q.list_machines(conn)
        cols = ["id", "name", "kind", "rated_speed_rpm", "min_operating_speed_rpm",
                "max_continuous_speed_rpm", "trip_speed_rpm", "profile", "rotation",
                "n_probes", "n_runs"]
        return pd.DataFrame([{
            "id": m.id, "name": m.spec.name, "kind": m.spec.kind,
            "rated_speed_rpm": m.spec.rated_speed_rpm,
            "min_operating_speed_rpm": m.spec.min_operating_speed_rpm,
            "max_continuous_speed_rpm": m.spec.max_continuous_speed_rpm,
            "trip_speed_rpm": m.spec.trip_speed_rpm, "profile": m.spec.profile,
            "rotation": m.spec.rotation, "n_probes": len(m.probes), "n_runs": m.n_runs}
            for m in ms], columns=cols)

    def runs(self, machine: str | None = None) -> pd.DataFrame:
        """One row per run, oldest first: ``id``, ``machine``, ``kind``, ``label``,
        ``cycle``, ``started_at`` (UTC), ``state``, ``source``, ``duration_s``,
        ``processed``, ``verdict`` (``pass``, ``fail``, ``not judged`` or empty)."""
        with self.database.read() as conn:
            rs = q.list_runs(conn)
        cols = ["id", "machine", "kind", "label", "cycle", "started_at", "state", "source",
                "duration_s", "processed", "verdict"]
        rows = [{"id": r.id, "machine": r.machine_name, "kind": r.kind, "label": r.label,
                 "cycle": r.cycle, "started_at": r.started_at, "state": r.state,
                 "source": r.source_name, "duration_s": r.duration_s,
                 "processed": r.processed, "verdict": r.verdict}
                for r in reversed(rs) if machine is None or r.machine_name == machine]
        df = pd.DataFrame(rows, columns=cols)
        df["started_at"] = pd.to_datetime(df["started_at"], utc=True)
        return df

    def run(self, run_id: int) -> Run:
        """The run ``run_id`` (:class:`~rundash.errors.NotFoundError` when there is none)."""
        with self.database.read() as conn:
            info = q.get_run(conn, int(run_id))
        return Run(self, info)


class Run:
    """One stored run: its facts as attributes (``id``, ``label``, ``kind``, ``cycle``,
    ``started_at``, ``state``, ``machine``, ``processed``) and its tables."""

    def __init__(self, db: RunDatabase, info) -> None:
        self.db, self.info = db, info
        self.id, self.label, self.kind, self.cycle = info.id, info.label, info.kind, info.cycle
        self.started_at, self.state, self.machine = info.started_at, info.state, info.machine_name
        self.processed = info.processed

    def __repr__(self) -> str:
        return (f"<rundash run {self.id}: {self.machine}, {self.label or self.kind}, "
                f"{'processed' if self.processed else 'not processed'}>")

    def vectors(self, order: float | Sequence[float] | None = 1, compensated: bool = True,
                probe: str | None = None) -> pd.DataFrame:
        """The nX vectors, one row per revolution (block), probe and order, with direction
        and units (the columns of ``rundash export --what vectors``).

        ``order``: one order, several, or None for every stored order. ``compensated``:
        True gives the slow-roll compensated vectors where processing made them; a probe
        and order without them comes as measured, its ``compensated`` column False: seismic
        probes always (slow roll is subtracted from proximity probes only), a proximity
        probe when no slow-roll window was found, then with a :class:`RundashWarning`
        naming it. False gives the vectors as measured.
        """
        orders = None if order is None else (
            [float(order)] if isinstance(order, (int, float)) else [float(o) for o in order])
        df = ex.vectors_table(self.db.database, self.id, orders=orders, probe=probe)
        if not compensated:
            return df[~df["compensated"]].reset_index(drop=True)
        has = df.groupby(["probe", "order"])["compensated"].transform("any")
        keep = df["compensated"] | ~has
        # seismic probes are never compensated (README, "Processing"): no news there
        missing = sorted({(p, o) for p, o in df.loc[~has & (df["kind"] == "proximity"),
                                                    ["probe", "order"]].itertuples(index=False)})
        if missing:
            warnings.warn(RundashWarning(
                f"run {self.id}: no slow-roll compensated vectors of "
                + ", ".join(f"{p} {o:g}X" for p, o in missing)
                + "; those rows are as measured (column 'compensated' False)"), stacklevel=2)
        return df[keep].reset_index(drop=True)

    def speed(self) -> pd.DataFrame:
        """The speed profile: one row per revolution (``revolution``, ``time_s``,
        ``speed_rpm``, ``direction``)."""
        return ex.speed_table(self.db.database, self.id)

    def cascade(self, probe: str | None = None) -> pd.DataFrame:
        """The cascade spectra, one row per spectrum line, probe and frequency."""
        return ex.cascade_table(self.db.database, self.id, probe=probe)

    def findings(self) -> Findings:
        """The findings of the processed run (:class:`~rundash.errors.NotFoundError` when
        it is not processed)."""
        with self.db.database.read() as conn:
            proc = q.load_processing(conn, self.id)
        if proc is None or proc.findings is None:
            raise NotFoundError(f"run {self.id} has no findings yet: process it first "
                                f"(rundash.process(db, {self.id}))")
        return Findings(proc.findings)


class Findings:
    """A run's findings (schema ``rundash.findings/1``, README "Findings and their JSON").

    ``verdict`` (``pass``, ``fail``, ``not judged``), ``criticals`` and ``limits``
    (DataFrames, the columns of ``rundash export --what findings`` / ``limits``),
    ``warnings``, ``caution``, ``data`` (the whole dict) and :meth:`to_json`.
    """

    def __init__(self, data: Mapping[str, Any]) -> None:
        self.data = dict(data)
        self.verdict: str = self.data.get("run_verdict") or "not judged"
        self.warnings: list[str] = list(self.data.get("warnings") or [])
        self.caution: str = self.data.get("caution") or CAUTION
        run_id = (self.data.get("run") or {}).get("id")
        self.run_id = run_id
        crit = ex.verdict_rows(self.data, "criticals", run_id)
        self.criticals: pd.DataFrame = crit[crit["probe"].notna()].reset_index(drop=True)
        lim = ex.verdict_rows(self.data, "limits", run_id)
        self.limits: pd.DataFrame = lim[lim["probe"].notna()].reset_index(drop=True)

    def __repr__(self) -> str:
        return (f"<rundash findings of run {self.run_id}: {self.verdict}, "
                f"{len(self.criticals)} critical-speed findings>")

    def to_json(self, indent: int | None = 2) -> str:
        """The findings JSON, as ``rundash findings RUN --json`` prints it."""
        return json.dumps(self.data, indent=indent)


class Comparison:
    """A comparison (schema ``rundash.comparison/1``): ``data``, ``table`` (the DataFrame of
    ``rundash compare --format``), ``verdicts`` (``{(a, b): verdict}``), ``hints``,
    ``caution`` and :meth:`to_json`."""

    def __init__(self, data: Mapping[str, Any]) -> None:
        self.data = dict(data)
        self.table: pd.DataFrame = ex.comparison_table(self.data)
        self.verdicts = {(p["a"], p["b"]): p["verdict"] for p in self.data.get("pairs") or []}
        self.hints: list[str] = list(self.data.get("hints") or [])
        self.caution: str = self.data.get("caution") or CAUTION

    def __repr__(self) -> str:
        return f"<rundash comparison {self.verdicts}>"

    def to_json(self, indent: int | None = 2) -> str:
        return json.dumps(self.data, indent=indent)


def import_file(db: RunDatabase | str | Path, data: str | Path, machine: str | Path, *,
                label: str = "", cycle: str = "", notes: str = "",
                started: datetime | None = None, kind: str = "mixed", force: bool = False,
                process: bool = False) -> Run:
    """Import the data file ``data`` as a new run of the machine described in the TOML file
    ``machine`` (as ``rundash import`` does: one transaction, a file imported before is
    refused unless ``force``); with ``process`` also process it. ``db`` is a
    :class:`RunDatabase` or a path/URL (a missing file is created, as the command does);
    the :class:`Run` returned reads from that database, so one opened here stays open
    until ``run.db.close()``. :func:`process` and :func:`compare` close a database they
    opened themselves before they return."""
    from rundash.ingest.importer import import_run
    from rundash.ingest.machine_file import load_machine_description

    rdb = _database(db, create=True)
    desc, text = load_machine_description(machine)
    res = import_run(rdb.database, data, desc, description_text=text, label=label,
                     cycle=cycle, notes=notes, started_at=started, kind=kind, force=force)
    for w in res.warnings:
        warnings.warn(RundashWarning(f"{Path(data).name}: {w}"), stacklevel=2)
    if process:
        _process(rdb, res.run_id)
    return rdb.run(res.run_id)


def _process(rdb: RunDatabase, run_id: int, **params) -> Findings | None:
    from rundash.workflows.pipeline import ProcessingParams, process_run

    res = process_run(rdb.database, int(run_id), params=ProcessingParams(**params))
    return None if res.findings is None else Findings(res.findings)


def process(db: RunDatabase | str | Path, run_id: int, *,
            orders: Sequence[float] = (1.0, 2.0, 3.0, 4.0),
            slow_roll_rpm: tuple[float, float] | None = None,
            revs_per_block: int = 1) -> Findings | None:
    """Process a stored run (as ``rundash process``), replacing its results; returns its
    :class:`Findings`."""
    with _using(db) as rdb:
        return _process(rdb, run_id, orders=tuple(float(o) for o in orders),
                        slow_roll_rpm=None if slow_roll_rpm is None else tuple(slow_roll_rpm),
                        revs_per_block=int(revs_per_block))


def compare(db: RunDatabase | str | Path, run_ids: Sequence[int], *, n_boot: int = 100,
            speeds_rpm: Sequence[float] | None = None) -> Comparison:
    """Compare processed runs of one machine, the first the reference (as ``rundash
    compare``: bootstrap uncertainties with ``n_boot`` replicates; lag and 1X compared at
    ``speeds_rpm``, by default the minimum operating and maximum continuous speed)."""
    from rundash.workflows.comparison import compare_runs

    with _using(db) as rdb:
        return Comparison(compare_runs(rdb.database, [int(r) for r in run_ids],
                                       phase_speeds_rpm=speeds_rpm, n_boot=n_boot))
