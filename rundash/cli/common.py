"""What the commands share: opening the database, the progress bar, plain tables, and
the argparse types that check option values (each error one line naming the option)."""

from __future__ import annotations

import gc
import sys
from datetime import datetime, timezone

from rundash.errors import OptionError

DEMO_DB = "rundash-demo.sqlite"

# True while main() runs as the program itself (``rundash ...``, ``python -m rundash.cli``),
# not called by a script or test in its own process
AS_PROGRAM = False


def settle_imports() -> None:
    """Take what has been imported so far (numpy, scipy, SQLAlchemy: a few hundred thousand
    objects that live until the program ends) out of the garbage collector's sight
    (:func:`gc.freeze`), so that its full collections during a long command and at exit do
    not walk them again: about half a second of ``rundash process`` of a 10-minute run
    (``benchmarks/bench_process.py``). Only when the command line is the program: a caller
    running :func:`rundash.cli.main` in its own process keeps its collector as it was."""
    if AS_PROGRAM:
        gc.freeze()


def parse_time(text: str) -> datetime:
    """argparse type of --started: an ISO 8601 time with its zone, in UTC."""
    try:
        t = datetime.fromisoformat(text.replace("Z", "+00:00"))
    except ValueError:
        raise OptionError(f"Invalid value for '--started': allowed an ISO 8601 time such as "
                         f"2026-05-01T06:00:00Z, got {text!r}") from None
    if t.tzinfo is None:
        raise OptionError(f"Invalid value for '--started': allowed a time with its zone "
                         f"(Z or +hh:mm), got {text!r}")
    return t.astimezone(timezone.utc)


def open_db(db: str | None, *, create: bool = False):
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
    database.on_lock_wait = lock_wait_reporter(database.shown)
    return database


def lock_wait_reporter(shown: str):
    """Say on stderr, after 1 s and then every 10 s, that a write waits for another
    writer's lock."""
    said = [-9.0]

    def report(waited_s: float, limit_s: float) -> None:
        if waited_s - said[0] >= 10.0:
            said[0] = waited_s
            print(f"\nwaiting for {shown}: another writer holds its write lock "
                  f"({waited_s:.0f} s of at most {limit_s:.0f} s)", file=sys.stderr, flush=True)
    return report


def progress_bar(quiet: bool):
    from rundash.progress import Bar, no_progress
    return no_progress if quiet else Bar()



MAX_CELL = 40
CONTROL_ESCAPES = {c: "\\x%02x" % c for c in [*range(32), 127]}
CONTROL_ESCAPES.update({ord("\n"): "\\n", ord("\r"): "\\r", ord("\t"): " ", 0x2028: " ", 0x2029: " ",
                 0x85: " "})


def cell(text: str, limit: int = MAX_CELL) -> str:
    """A table cell on one line: control characters shown escaped (a name may hold a line
    break), at most ``limit`` characters (a longer one ends in '…').

    >>> cell("K-101\\nrecycle"), cell("x" * 50, 10)
    ('K-101\\\\nrecycle', 'xxxxxxxxx…')
    """
    text = str(text).translate(CONTROL_ESCAPES)
    return text if len(text) <= limit else text[: limit - 1] + "…"


def print_table(rows: list[tuple[str, ...]]) -> None:
    rows = [tuple(cell(c) for c in r) for r in rows]
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    for k, r in enumerate(rows):
        print("  ".join(c.ljust(w) for c, w in zip(r, widths)).rstrip())
        if k == 0:
            print("  ".join("-" * w for w in widths))


def parse_orders(text: str) -> tuple[float, ...]:
    """argparse type of --orders: a comma-separated list of orders."""
    try:
        orders = tuple(float(o) for o in text.split(",") if o.strip())
    except ValueError:
        orders = ()
    if not orders or any(not (0 < o <= 40) for o in orders):
        raise OptionError(f"Invalid value for '--orders': allowed a comma-separated list of "
                         f"orders between 0 and 40 such as 1,2,3,4 or 0.5,1,2, got {text!r}")
    return orders


def parse_speeds(text: str) -> list[float]:
    """argparse type of --speeds: a comma-separated list of speeds in rpm."""
    try:
        speeds = [float(x) for x in text.split(",") if x.strip()]
    except ValueError:
        speeds = []
    if not speeds or any(not v > 0 for v in speeds):
        raise OptionError(f"Invalid value for '--speeds': allowed a comma-separated list of "
                         f"speeds in rpm such as 4400,5460, got {text!r}")
    return speeds


def replicates(text: str) -> int:
    """argparse type of --boot: bootstrap replicates, an integer >= 0."""
    try:
        n = int(text)
    except ValueError:
        n = -1
    if n < 0:
        raise OptionError(f"Invalid value for '--boot': allowed an integer >= 0, got {text!r}")
    return n


def parse_window(text: str) -> tuple[float, float]:
    """argparse type of --slow-roll: LOW:HIGH in rpm."""
    try:
        lo, hi = (float(v) for v in text.split(":"))
    except ValueError:
        lo = hi = float("nan")
    if not (0 <= lo < hi):
        raise OptionError(f"Invalid value for '--slow-roll': allowed LOW:HIGH in rpm with "
                         f"0 <= LOW < HIGH, such as 250:400, got {text!r}")
    return lo, hi
