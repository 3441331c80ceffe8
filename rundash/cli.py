"""The ``rundash`` command line. ``main(argv) -> int``; every command is a function.

Expected errors (bad input, a refused import, a missing run) print one line and exit 1;
Ctrl-C exits 130. Dash is imported only by the commands that serve the dashboard.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
from datetime import datetime, timezone
from pathlib import Path
from typing import Sequence

from rundash import CAUTION, __version__
from rundash.errors import InputError, RundashError

DEMO_DB = "rundash-demo.sqlite"


def _parse_time(text: str | None) -> datetime | None:
    if text is None:
        return None
    try:
        t = datetime.fromisoformat(text.replace("Z", "+00:00"))
    except ValueError:
        raise InputError(f"Invalid value for '--started': allowed an ISO 8601 time such as "
                         f"2026-05-01T06:00:00Z, got {text!r}") from None
    if t.tzinfo is None:
        raise InputError(f"Invalid value for '--started': allowed a time with its zone "
                         f"(Z or +hh:mm), got {text!r}")
    return t.astimezone(timezone.utc)


def _open(db: str | None, *, create: bool = False):
    """Open the database; only the commands that store new runs (import, record, demo,
    sync's destination) may create it. An older schema is upgraded, saying so."""
    from rundash.errors import NoDatabaseError
    from rundash.storage.engine import open_database

    try:
        database = open_database(db, create=create,
                                 log=lambda line: print(line, file=sys.stderr, flush=True))
    except NoDatabaseError as exc:
        raise NoDatabaseError(f"no database at {exc.path}: the file does not exist (check "
                              "--db or $RUNDASH_DB; 'rundash import' or 'rundash demo' makes "
                              "a new one)", exc.path) from None
    database.on_lock_wait = _lock_wait_reporter(database.shown)
    return database


def _lock_wait_reporter(shown: str):
    """Say on stderr, after 1 s and then every 10 s, that a write waits for another
    writer's lock."""
    said = [-9.0]

    def report(waited_s: float, limit_s: float) -> None:
        if waited_s - said[0] >= 10.0:
            said[0] = waited_s
            print(f"\nwaiting for {shown}: another writer holds its write lock "
                  f"({waited_s:.0f} s of at most {limit_s:.0f} s)", file=sys.stderr, flush=True)
    return report


def _bar(quiet: bool):
    from rundash.progress import Bar, no_progress
    return no_progress if quiet else Bar()


# ----------------------------------------------------------------------------- commands
def cmd_import(*, db: str | None, data: str, machine: str, label: str, cycle: str, notes: str,
               started: str | None, kind: str, force: bool, process: bool, quiet: bool) -> int:
    from rundash.ingest.importer import import_run
    from rundash.ingest.machine_file import load_machine_description

    desc, text = load_machine_description(machine)
    database = _open(db, create=True)
    bar = _bar(quiet)
    res = import_run(database, data, desc, description_text=text, label=label, cycle=cycle,
                     notes=notes, started_at=_parse_time(started), kind=kind, force=force,
                     progress=bar)
    if hasattr(bar, "close"):
        bar.close()
    if not quiet and res.time_base:
        print(f"time base: {res.time_base}", file=sys.stderr)
    for w in res.warnings:
        print(f"warning: {w}", file=sys.stderr)
    if process:
        from rundash.workflows.pipeline import process_run
        try:
            process_run(database, res.run_id, progress=bar)
        except RundashError as exc:  # the import stands: say which run is left unprocessed
            raise type(exc)(f"{Path(data).name}: imported as run {res.run_id} but not "
                            f"processed ({exc}); fix and run 'rundash process {res.run_id}'"
                            ) from exc
        if hasattr(bar, "close"):
            bar.close()
    print(res.run_id)
    return 0


def cmd_runs(*, db: str | None, machine: str | None, as_json: bool) -> int:
    from rundash.storage import queries as q

    database = _open(db)
    with database.read() as conn:
        runs = q.list_runs(conn)
    if machine:
        runs = [r for r in runs if r.machine_name == machine]
    if as_json:
        print(json.dumps([{
            "id": r.id, "machine": r.machine_name, "kind": r.kind, "label": r.label,
            "cycle": r.cycle, "started_at": r.started_at.isoformat() if r.started_at else None,
            "state": r.state, "source": r.source_name, "duration_s": round(r.duration_s, 3),
            "processed": r.processed, "verdict": r.verdict} for r in runs], indent=2))
        return 0
    rows = [("id", "machine", "kind", "started (UTC)", "cycle", "label", "state", "processed",
             "verdict")]
    for r in runs:
        rows.append((str(r.id), r.machine_name, r.kind,
                     r.started_at.strftime("%Y-%m-%d %H:%M") if r.started_at else "-",
                     r.cycle or "-", r.label, r.state, "yes" if r.processed else "no",
                     r.verdict or "-"))
    _table(rows)
    return 0


def cmd_machines(*, db: str | None) -> int:
    from rundash.storage import queries as q

    database = _open(db)
    with database.read() as conn:
        machines = q.list_machines(conn)
    rows = [("id", "name", "kind", "operating range (rpm)", "trip (rpm)", "profile", "probes",
             "runs")]
    for m in machines:
        s = m.spec
        rows.append((str(m.id), s.name, s.kind,
                     f"{s.min_operating_speed_rpm:g}-{s.max_continuous_speed_rpm:g}",
                     f"{s.trip_speed_rpm:g}" if s.trip_speed_rpm else "-", s.profile,
                     str(len(m.probes)), str(m.n_runs)))
    _table(rows)
    return 0


MAX_CELL = 40
_CONTROL = {c: "\\x%02x" % c for c in [*range(32), 127]}
_CONTROL.update({ord("\n"): "\\n", ord("\r"): "\\r", ord("\t"): " ", 0x2028: " ", 0x2029: " ",
                 0x85: " "})


def _cell(text: str, limit: int = MAX_CELL) -> str:
    """A table cell on one line: control characters shown escaped (a name may hold a line
    break), at most ``limit`` characters (a longer one ends in '…').

    >>> _cell("K-101\\nrecycle"), _cell("x" * 50, 10)
    ('K-101\\\\nrecycle', 'xxxxxxxxx…')
    """
    text = str(text).translate(_CONTROL)
    return text if len(text) <= limit else text[: limit - 1] + "…"


def _table(rows: list[tuple[str, ...]]) -> None:
    rows = [tuple(_cell(c) for c in r) for r in rows]
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    for k, r in enumerate(rows):
        print("  ".join(c.ljust(w) for c, w in zip(r, widths)).rstrip())
        if k == 0:
            print("  ".join("-" * w for w in widths))


def _parse_orders(text: str) -> tuple[float, ...]:
    try:
        orders = tuple(float(o) for o in text.split(",") if o.strip())
    except ValueError:
        orders = ()
    if not orders or any(not (0 < o <= 40) for o in orders):
        raise InputError(f"Invalid value for '--orders': allowed a comma-separated list of "
                         f"orders between 0 and 40 such as 1,2,3,4 or 0.5,1,2, got {text!r}")
    return orders


def _parse_window(text: str | None) -> tuple[float, float] | None:
    if text is None:
        return None
    try:
        lo, hi = (float(v) for v in text.split(":"))
    except ValueError:
        lo = hi = float("nan")
    if not (0 <= lo < hi):
        raise InputError(f"Invalid value for '--slow-roll': allowed LOW:HIGH in rpm with "
                         f"0 <= LOW < HIGH, such as 250:400, got {text!r}")
    return lo, hi


def cmd_process(*, db: str | None, run: int, orders: str, revs_per_block: int,
                slow_roll: str | None, quiet: bool, timings: bool = False) -> int:
    from rundash.workflows.pipeline import ProcessingParams, process_run

    params = ProcessingParams(orders=_parse_orders(orders), revs_per_block=revs_per_block,
                              slow_roll_rpm=_parse_window(slow_roll))
    database = _open(db)
    bar = _bar(quiet)
    res = process_run(database, run, params=params, progress=bar)
    if hasattr(bar, "close"):
        bar.close()
    for w in res.warnings:
        print(f"warning: {w}", file=sys.stderr)
    sr = (f"{res.slow_roll_rpm[0]:.0f}-{res.slow_roll_rpm[1]:.0f} rpm" if res.slow_roll_rpm
          else "none")
    print(f"run {run}: {res.run_kind}, {res.n_revs} revolutions, {res.n_blocks} vectors per "
          f"probe and order, slow-roll window {sr}")
    if res.findings is not None:
        print(f"verdict: {res.findings.get('run_verdict')} "
              f"({len(res.findings.get('criticals', []))} critical-speed findings)")
    if timings:
        print(f"stage times, wall and CPU s ('read' runs beside 'tracking' in a second "
              f"thread), wall {res.wall_s:.2f} s:")
        for stage, sec in res.stage_s.items():
            print(f"  {stage:<12} {sec:7.2f} {res.stage_cpu_s.get(stage, 0.0):7.2f}")
    return 0


def cmd_findings(*, db: str | None, run: int, as_json: bool) -> int:
    from rundash import presentation as pr
    from rundash.errors import NotFoundError
    from rundash.storage import queries as q

    database = _open(db)
    with database.read() as conn:
        q.get_run(conn, run)
        proc = q.load_processing(conn, run)
        kinds = {c.probe_name: c.kind for c in q.list_channels(conn, run) if c.role == "probe"}
    if proc is None or proc.findings is None:
        raise NotFoundError(f"run {run} has no findings yet: run 'rundash process {run}' first")
    f = proc.findings
    if as_json:
        print(json.dumps(f, indent=2))
        return 0
    r, mach = f["run"], f["machine"]
    print(f"run {r['id']}: {r['machine']} — {r['label']} ({r['kind']}, {r['cycle'] or 'no cycle'}, "
          f"{r['started_at'] or 'start time not given'})")
    print(f"operating range {pr.number(mach['min_operating_speed_rpm'])}-"
          f"{pr.number(mach['max_continuous_speed_rpm'])} rpm; profile {f['profile']['name']}: "
          f"{f['profile']['title']}")
    print(f"verdict: {f['run_verdict'].upper()}")
    print(pr.summary_line(f))
    print()
    cols = [("probe", "probe"), ("direction", "dir"), ("speed", "speed rpm"),
            ("peak", "peak 1X"), ("af_half_power", "AF hp"), ("af_phase", "AF phase"),
            ("af_fit", "AF fit"), ("classification", "class"), ("confidence", "conf"),
            ("margin", "margin"), ("required", "required"), ("verdict", "verdict")]
    crit = pr.critical_rows(f, kinds=kinds)
    if crit:
        _table([tuple(t for _, t in cols)] + [tuple(c[k] for k, _ in cols) for c in crit])
    else:
        print("no critical speed found in the speed range of the run")
    judged = [x for x in pr.limit_rows(f, kinds=kinds) if x["judged"]]
    if judged:
        print()
        cols = [("probe", "probe"), ("direction", "dir"), ("measure", "measure"),
                ("where", "where"), ("speed", "at rpm"), ("value", "level"), ("limit", "limit"),
                ("zone", "zone"), ("verdict", "result")]
        _table([tuple(t for _, t in cols)] + [tuple(x[k] for k, _ in cols) for x in judged])
    for w in f["warnings"]:
        print(f"note: {w}")
    print()
    print(f["caution"])
    return 0


def cmd_serve(*, db: str | None, host: str, port: int, debug: bool,
              password_file: str | None) -> int:
    from rundash.dashboard.app import serve
    from rundash.dashboard.security import check_serve_options, resolve_password

    password = resolve_password(password_file)
    check_serve_options(host, password=password, debug=debug)  # before opening anything
    database = _open(db)
    return serve(database, host=host, port=port, debug=debug, password=password)


def cmd_demo(*, db: str | None, host: str, port: int, serve: bool, quiet: bool) -> int:
    from rundash.workflows.demo import build_demo

    database = _open(db or DEMO_DB, create=True)
    ids = build_demo(database, progress=_bar(quiet), log=print)
    print(f"demo database: {database.url} ({len(ids)} runs)")
    if not serve:
        return 0
    from rundash.dashboard.app import serve as serve_app
    from rundash.dashboard.security import resolve_password
    return serve_app(database, host=host, port=port, debug=False, password=resolve_password())


def cmd_sync(*, source: str, to: str, machine: str | None, as_json: bool, quiet: bool) -> int:
    from rundash.storage.sync import sync

    src, dst = _open(source), _open(to, create=True)
    bar = _bar(quiet or as_json)

    def log(line: str) -> None:
        if hasattr(bar, "close"):
            bar.close()
        if not as_json:
            print(line, flush=True)

    report = sync(src, dst, machine=machine, progress=bar, log=log)
    if hasattr(bar, "close"):
        bar.close()
    if as_json:
        print(json.dumps(report.to_dict(), indent=2, default=str))
        return 0
    for name in report.machines_created:
        print(f"machine created: {name}")
    for name in report.machines_differing:
        print(f"machine kept as the destination describes it (the source differs): {name}")
    for name in report.probes_added:
        print(f"probe added: {name}")
    print(f"sync {report.source} -> {report.destination}: {report.summary()}")
    return 0


def cmd_compare(*, db: str | None, runs: list[int], as_json: bool, boot: int,
                speeds: str | None) -> int:
    from rundash import presentation as pr
    from rundash.workflows.comparison import compare_runs

    phase_speeds = None
    if speeds:
        try:
            phase_speeds = [float(x) for x in speeds.split(",") if x.strip()]
        except ValueError:
            phase_speeds = []
        if not phase_speeds or any(not v > 0 for v in phase_speeds):
            raise InputError(f"Invalid value for '--speeds': allowed a comma-separated list of "
                             f"speeds in rpm such as 4400,5460, got {speeds!r}")
    if boot < 0:
        raise InputError(f"Invalid value for '--boot': allowed an integer >= 0, got {boot!r}")
    c = compare_runs(_open(db), runs, phase_speeds_rpm=phase_speeds, n_boot=boot)
    if as_json:
        print(json.dumps(c, indent=2))
        return 0
    by_id = {r["id"]: r for r in c["runs"]}
    print(f"{c['machine']['name']}: comparison with {pr.run_name(by_id[c['reference']])}")
    for p in c["pairs"]:
        print()
        print(f"{pr.run_name(by_id[p['a']])} -> {pr.run_name(by_id[p['b']])}: "
              f"{p['verdict'].upper()}")
        cols = [("probe", "probe"), ("direction", "dir"), ("speeds", "critical rpm"),
                ("speed_shift", "shift"), ("speed_sig", "speed shift"), ("afs", "AF"),
                ("af_shift", "AF change"), ("peaks", "peak 1X"), ("peak_shift", "peak change"),
                ("changed", "changed")]
        rows = pr.shift_rows({"pairs": [p]})
        _table([tuple(t for _, t in cols)] + [tuple(m[k] for k, _ in cols) for m in rows])
        ph = pr.phase_rows(p)
        if ph:
            print()
            cols = [("probe", "probe"), ("quantity", "quantity"), ("a", "a"), ("b", "b"),
                    ("change", "change"), ("significant", "change is")]
            _table([tuple(t for _, t in cols)] + [tuple(x[k] for k, _ in cols) for x in ph])
        sr = pr.slow_roll_rows(p)
        if sr:
            print()
            cols = [("probe", "probe"), ("a", "slow roll a"), ("b", "slow roll b"),
                    ("change", "change"), ("material", "material")]
            _table([tuple(t for _, t in cols)] + [tuple(x[k] for k, _ in cols) for x in sr])
        for n in pr.pair_notes(p):
            print(f"note: {n}")
    if c["hints"]:
        print()
        for h in c["hints"]:
            print(h)
    print()
    print(f"significant: {c['rule']}")
    print(f"uncertainties (±, one sigma): {c['method']}")
    print()
    print(c["caution"])
    return 0


def cmd_report(*, db: str | None, run: int, compare: list[int] | None, output: str,
               reviewer: str, decision: str, remarks: str, boot: int) -> int:
    from rundash.report import write_report

    path = write_report(_open(db), run, output, compare=compare or (), reviewer=reviewer,
                        decision=decision, remarks=remarks, n_boot=boot)
    print(path)
    return 0


def cmd_record(*, db: str | None, machine: str, source: str, label: str, cycle: str,
               notes: str, lead_time: float, dwell_limit: float, no_process: bool) -> int:
    import signal

    from rundash.ingest.machine_file import load_machine_description
    from rundash.ingest.sources import parse_source
    from rundash.workflows.live import LiveParams, WarningSettings, record_live

    desc, text = load_machine_description(machine)
    database = _open(db, create=True)
    src = parse_source(source, desc.data)
    # a polite stop (kill, service manager) ends the run like Ctrl-C: kept, incomplete
    def _stop(*_):
        raise KeyboardInterrupt

    signal.signal(signal.SIGTERM, _stop)
    params = LiveParams(warnings=WarningSettings(lead_time_s=lead_time, dwell_limit_s=dwell_limit),
                        process_at_end=not no_process)
    res = record_live(database, desc, src, description_text=text, label=label, cycle=cycle,
                      notes=notes, started_at=datetime.now(timezone.utc), params=params,
                      log=lambda line: print(line, file=sys.stderr, flush=True))
    for w in res.notes:
        print(f"warning: {w}", file=sys.stderr)
    if res.processed:
        print(CAUTION, file=sys.stderr)
    if res.error is not None:
        raise InputError(f"run {res.run_id} kept as incomplete ({res.n_samples} samples per "
                         f"channel): {res.error}")
    print(res.run_id)
    return 0


def cmd_reprocess(*, db: str | None, machine: str | None, all_runs: bool, workers: int,
                  scheduler: str | None, orders: str, quiet: bool) -> int:
    from rundash.workflows.batch import reprocess
    from rundash.errors import NotFoundError
    from rundash.storage import queries as q

    if not machine and not all_runs:
        raise InputError("say which runs: --machine NAME or --all")
    database = _open(db)
    with database.read() as conn:
        runs = [r for r in q.list_runs(conn) if r.state == "complete"
                and (all_runs or r.machine_name == machine)]
    if not runs:
        raise NotFoundError("no complete runs to process" +
                            (f" for machine {machine!r}" if machine else ""))
    bar = _bar(quiet)

    def log(line: str) -> None:
        if hasattr(bar, "close"):
            bar.close()
        print(line, flush=True)

    report = reprocess(database.url, sorted(r.id for r in runs), workers=workers,
                       scheduler=scheduler, params={"orders": list(_parse_orders(orders))},
                       progress=bar, log=log)
    if hasattr(bar, "close"):
        bar.close()
    print(report.summary())
    for o in report.failed:
        print(f"failed: {o.line()}")
    print(CAUTION)
    return 0 if not report.failed else 1


# ----------------------------------------------------------------------------- parser
def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="rundash",
        description="Start-up and coast-down analysis of rotating machines. " + CAUTION)
    p.add_argument("--version", action="version", version=f"rundash {__version__}")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")

    def with_db(sp):
        sp.add_argument("--db", help="database file or SQLAlchemy URL (default: $RUNDASH_DB, "
                                     "else ./rundash.sqlite)")
        return sp

    s = with_db(sub.add_parser("import", help="import a recorded data file as a new run"))
    s.add_argument("data", help="data file: .csv, .wav, .h5/.hdf5 or .parquet")
    s.add_argument("--machine", required=True, help="machine description file (TOML)")
    s.add_argument("--label", default="", help="a short name for the run (default: file name)")
    s.add_argument("--cycle", default="", help="overhaul-cycle tag, e.g. '2026 overhaul'")
    s.add_argument("--notes", default="", help="free text kept with the run")
    s.add_argument("--started", help="start time of the record, ISO 8601 with zone")
    s.add_argument("--kind", default="mixed", choices=["run-up", "coast-down", "mixed", "steady"],
                   help="what the run is (processing corrects it from the speed profile)")
    s.add_argument("--force", action="store_true", help="import a file imported before")
    s.add_argument("--process", action="store_true", help="process the run right after import")
    s.add_argument("--quiet", action="store_true", help="no progress bar")

    s = with_db(sub.add_parser("runs", help="list the stored runs, newest first"))
    s.add_argument("--machine", help="only this machine's runs")
    s.add_argument("--json", dest="as_json", action="store_true", help="JSON output")

    with_db(sub.add_parser("machines", help="list the stored machines"))

    s = with_db(sub.add_parser("process", help="order-track a run and find its critical speeds"))
    s.add_argument("run", type=int, help="run id (see 'rundash runs')")
    s.add_argument("--orders", default="1,2,3,4", help="orders to track (default 1,2,3,4)")
    s.add_argument("--revs-per-block", type=int, default=1,
                   help="revolutions per vector (default 1; 2 or more for half orders)")
    s.add_argument("--slow-roll", metavar="LOW:HIGH",
                   help="slow-roll speed window in rpm (default: chosen automatically)")
    s.add_argument("--quiet", action="store_true", help="no progress bar")
    s.add_argument("--timings", action="store_true",
                   help="print the seconds spent per stage (read, tach, speed, tracking, ...)")

    s = with_db(sub.add_parser("findings", help="critical speeds, AFs, margins and limit "
                                                "checks of a processed run"))
    s.add_argument("run", type=int, help="run id (see 'rundash runs')")
    s.add_argument("--json", dest="as_json", action="store_true",
                   help="the findings as JSON (schema rundash.findings/1, see the README)")

    s = with_db(sub.add_parser("serve", help="serve the dashboard"))
    s.add_argument("--host", default="127.0.0.1",
                   help="address to bind (default 127.0.0.1: this computer only); any other "
                        "address needs a password from $RUNDASH_PASSWORD or --password-file")
    s.add_argument("--port", type=int, default=8050)
    s.add_argument("--password-file", metavar="FILE",
                   help="file whose first line is the dashboard password (HTTP basic auth, "
                        "user 'rundash'); default: $RUNDASH_PASSWORD")
    s.add_argument("--debug", action="store_true", help=argparse.SUPPRESS)  # loopback only

    s = sub.add_parser("demo", help="build the demo database from the bundled sample runs, "
                                    "process them and serve the dashboard")
    s.add_argument("--db", help=f"demo database (default ./{DEMO_DB})")
    s.add_argument("--host", default="127.0.0.1")
    s.add_argument("--port", type=int, default=8050)
    s.add_argument("--no-serve", dest="serve", action="store_false",
                   help="build and process only; do not start the dashboard")
    s.add_argument("--quiet", action="store_true", help="no progress bar")
    s = with_db(sub.add_parser("reprocess", help="process many runs in parallel on a Dask "
                                                 "cluster (local by default)"))
    g = s.add_mutually_exclusive_group(required=True)
    g.add_argument("--machine", help="every complete run of this machine (by name)")
    g.add_argument("--all", dest="all_runs", action="store_true", help="every complete run")
    s.add_argument("--workers", type=int, default=os.cpu_count() or 1,
                   help="worker processes of the local cluster (default: one per core)")
    s.add_argument("--scheduler", metavar="ADDRESS",
                   help="a running Dask scheduler, e.g. tcp://10.0.0.5:8786, instead of a "
                        "local cluster")
    s.add_argument("--orders", default="1,2,3,4", help="orders to track (default 1,2,3,4)")
    s.add_argument("--quiet", action="store_true", help="no progress bar")
    s = sub.add_parser("sync", help="copy machines, runs, waveforms and results into another "
                                    "database; runs already there are skipped")
    s.add_argument("--from", dest="source", required=True,
                   help="database to copy from (file or SQLAlchemy URL)")
    s.add_argument("--to", required=True,
                   help="database to copy into (file or URL, e.g. postgresql://host/db)")
    s.add_argument("--machine", help="only this machine's runs (by name)")
    s.add_argument("--json", dest="as_json", action="store_true", help="the report as JSON")
    s.add_argument("--quiet", action="store_true", help="no progress bar")
    s = with_db(sub.add_parser("compare", help="what changed between runs of one machine, "
                                               "with uncertainties (first run = reference)"))
    s.add_argument("runs", type=int, nargs="+", metavar="RUN",
                   help="two or more processed run ids; later runs are compared with the first")
    s.add_argument("--json", dest="as_json", action="store_true",
                   help="the comparison as JSON (schema rundash.comparison/1, see the README)")
    s.add_argument("--boot", type=int, default=100,
                   help="bootstrap replicates for the uncertainties (default 100)")
    s.add_argument("--speeds", help="speeds (rpm) at which lag and 1X are compared, e.g. "
                                    "4400,5460 (default: minimum operating and maximum "
                                    "continuous speed)")

    s = with_db(sub.add_parser("report", help="write the sign-off report of a run (HTML or "
                                              "PDF)"))
    s.add_argument("run", type=int, help="run id (see 'rundash runs')")
    s.add_argument("--compare", type=int, nargs="+", metavar="RUN",
                   help="earlier or later runs to compare with this one")
    s.add_argument("-o", "--output", required=True,
                   help="report file: .html (self-contained, opens offline) or .pdf")
    s.add_argument("--reviewer", default="", help="name printed in the sign-off block")
    s.add_argument("--decision", default="", help="decision printed in the sign-off block "
                                                  "(left blank to fill in by hand)")
    s.add_argument("--remarks", default="", help="remarks printed in the sign-off block")
    s.add_argument("--boot", type=int, default=100,
                   help="bootstrap replicates for the comparison (default 100)")
    s = with_db(sub.add_parser("record", help="record a run as its data arrives, with live "
                                              "vectors and warnings"))
    s.add_argument("--machine", required=True, help="machine description file (TOML)")
    s.add_argument("--source", required=True,
                   help="replay:FILE[@SPEED] (x real time, 0 = unpaced), folder:DIR, "
                        "tcp:127.0.0.1:PORT or python:MODULE:FACTORY[=ARG] (see the README)")
    s.add_argument("--label", default="", help="a short name for the run")
    s.add_argument("--cycle", default="", help="overhaul-cycle tag")
    s.add_argument("--notes", default="", help="free text kept with the run")
    s.add_argument("--lead-time", type=float, default=30.0,
                   help="warn this many seconds before an expected critical band (default 30)")
    s.add_argument("--dwell-limit", type=float, default=10.0,
                   help="warn after this many seconds inside a critical band (default 10)")
    s.add_argument("--no-process", action="store_true",
                   help="do not process the run when the recording ends")
    return p


COMMANDS = {"import": cmd_import, "record": cmd_record, "process": cmd_process, "findings": cmd_findings, "compare": cmd_compare, "report": cmd_report, "runs": cmd_runs, "machines": cmd_machines,
            "serve": cmd_serve, "demo": cmd_demo, "sync": cmd_sync,
            "reprocess": cmd_reprocess}


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    kwargs = {k: v for k, v in vars(args).items() if k not in ("command", "func")}
    func = getattr(args, "func", None) or COMMANDS[args.command]
    try:
        return func(**kwargs)
    except (RundashError, OSError) as exc:
        msg = str(exc)
        if isinstance(exc, OSError) and exc.strerror:  # the system refused: disk, rights, port
            msg = f"{exc.strerror}" + (f": {exc.filename}" if exc.filename else "")
        # one line whatever the message holds (a file name may carry a line break)
        msg = msg.replace("\r", "\\r").replace("\n", "\\n")
        print(f"rundash {args.command}: error: {msg}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
