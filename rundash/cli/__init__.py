"""The ``rundash`` command line. ``main(argv) -> int``; every command is a function.

Expected errors (bad input, a refused import, a missing run) print one line and exit 1;
Ctrl-C exits 130. Dash is imported only by the commands that serve the dashboard.
"""

from __future__ import annotations

import argparse
import os
import sys
from typing import Sequence

from rundash import CAUTION, __version__
from rundash.cli.commands import (
    cmd_compare, cmd_demo, cmd_export, cmd_findings, cmd_import, cmd_machines, cmd_process, cmd_record,
    cmd_report, cmd_reprocess, cmd_runs, cmd_serve, cmd_sync,
)
from rundash.cli.review import add_parsers as add_review_parsers
from rundash.cli.review import cmd_delete, cmd_edit, cmd_review_show
from rundash.cli.common import (
    DEMO_DB, parse_orders, parse_speeds, parse_time, parse_window, replicates,
)
from rundash.errors import RundashError


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
    s.add_argument("--started", type=parse_time,
                   help="start time of the record, ISO 8601 with zone")
    s.add_argument("--kind", default="mixed",
                   choices=["run-up", "coast-down", "mixed", "steady", "shop-test", "trip-test"],
                   help="what the run is: a field run's direction (processing corrects it "
                        "from the speed profile), or a shop (mechanical running) test or an "
                        "overspeed trip test, which decides the rules in scope")
    s.add_argument("--force", action="store_true", help="import a file imported before")
    s.add_argument("--process", action="store_true", help="process the run right after import")
    s.add_argument("--quiet", action="store_true", help="no progress bar")

    s = with_db(sub.add_parser("runs", help="list the stored runs, newest first"))
    s.add_argument("--machine", help="only this machine's runs")
    s.add_argument("--json", dest="as_json", action="store_true", help="JSON output")

    with_db(sub.add_parser("machines", help="list the stored machines"))

    s = with_db(sub.add_parser("process", help="order-track a run and find its critical speeds"))
    s.add_argument("run", type=int, help="run id (see 'rundash runs')")
    s.add_argument("--orders", type=parse_orders, default="1,2,3,4",
                   help="orders to track (default 1,2,3,4)")
    s.add_argument("--revs-per-block", type=int, default=1,
                   help="revolutions per vector (default 1; 2 or more for half orders)")
    s.add_argument("--slow-roll", metavar="LOW:HIGH", type=parse_window,
                   help="slow-roll speed window in rpm (default: chosen automatically)")
    s.add_argument("--tracker", choices=("order", "vold-kalman"),
                   help="how the order vectors are measured: 'order' (computed order tracking, "
                        "a DFT over each block of whole revolutions) or 'vold-kalman' (every "
                        "order filtered jointly: close orders, fast sweeps); default: "
                        "[processing] tracker of the machine description, else 'order'")
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
    s.add_argument("--orders", type=parse_orders, default="1,2,3,4",
                   help="orders to track (default 1,2,3,4)")
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
    s.add_argument("--boot", type=replicates, default=100,
                   help="bootstrap replicates for the uncertainties (default 100)")
    s.add_argument("--speeds", type=parse_speeds, help="speeds (rpm) at which lag and 1X are compared, e.g. "
                                    "4400,5460 (default: minimum operating and maximum "
                                    "continuous speed)")
    s.add_argument("--format", dest="fmt", choices=["csv", "parquet", "xlsx"],
                   help="the comparison as a table (one row per compared quantity, see the "
                        "README) instead of text; to -o FILE, or csv to stdout")
    s.add_argument("-o", "--output", help="file for --format (default: stdout, csv only)")

    s = with_db(sub.add_parser("export", help="a run's vectors, speed profile, findings, "
                                              "limit checks or cascade as a table file"))
    s.add_argument("run", type=int, help="run id (see 'rundash runs')")
    s.add_argument("--what", required=True,
                   choices=["vectors", "speed", "findings", "limits", "cascade"],
                   help="which table (columns in the README, 'Exports')")
    s.add_argument("--orders", type=parse_orders, default=None,
                   help="vectors: only these orders, e.g. 1,2 (default: every stored order)")
    s.add_argument("--probe", help="only this probe (vectors, findings, limits, cascade)")
    s.add_argument("--format", dest="fmt", choices=["csv", "parquet", "xlsx"],
                   help="file format (default: from the ending of -o)")
    s.add_argument("-o", "--output", required=True,
                   help="file to write (.csv, .parquet, .xlsx); '-' writes csv to stdout")

    s = with_db(sub.add_parser("report", help="write the sign-off report of a run (HTML or "
                                              "PDF)"))
    s.add_argument("run", type=int, help="run id (see 'rundash runs')")
    s.add_argument("--compare", type=int, nargs="+", metavar="RUN",
                   help="earlier or later runs to compare with this one")
    s.add_argument("-o", "--output", required=True,
                   help="report file: .html (self-contained, opens offline) or .pdf")
    s.add_argument("--reviewer", default="", help="name printed in the sign-off block")
    s.add_argument("--role", default="", help="the reviewer's role printed in the sign-off "
                                              "block")
    s.add_argument("--decision", default="", help="decision printed in the sign-off block "
                                                  "(left blank to fill in by hand)")
    s.add_argument("--remarks", default="", help="remarks printed in the sign-off block")
    s.add_argument("--boot", type=replicates, default=100,
                   help="bootstrap replicates for the comparison (default 100)")
    add_review_parsers(sub, with_db)
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


COMMANDS = {"import": cmd_import, "record": cmd_record, "process": cmd_process, "findings": cmd_findings, "compare": cmd_compare, "export": cmd_export, "report": cmd_report, "runs": cmd_runs, "machines": cmd_machines,
            "serve": cmd_serve, "demo": cmd_demo, "sync": cmd_sync,
            "reprocess": cmd_reprocess, "review": cmd_review_show, "edit": cmd_edit,
            "delete": cmd_delete}


def main(argv: Sequence[str] | None = None) -> int:
    from rundash.cli import common

    common.AS_PROGRAM = argv is None
    try:
        return _main(argv)
    finally:
        common.settle_imports()  # nothing is left to collect: exit without walking it all


def _main(argv: Sequence[str] | None) -> int:
    parser = build_parser()
    argv = list(sys.argv[1:] if argv is None else argv)
    command = next((a for a in argv if a in COMMANDS), "")
    try:
        args = parser.parse_args(argv)  # argparse types raise OptionError: one line, exit 1
        kwargs = {k: v for k, v in vars(args).items() if k not in ("command", "func")}
        func = getattr(args, "func", None) or COMMANDS[args.command]
        return func(**kwargs)
    except (RundashError, OSError) as exc:
        msg = str(exc)
        if isinstance(exc, OSError) and exc.strerror:  # the system refused: disk, rights, port
            msg = f"{exc.strerror}" + (f": {exc.filename}" if exc.filename else "")
        # one line whatever the message holds (a file name may carry a line break)
        msg = msg.replace("\r", "\\r").replace("\n", "\\n")
        print(f"rundash {command}: error: {msg}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
