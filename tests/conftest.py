"""Shared fixtures: databases are built by running the migrations, never by create_all.

Storage and pipeline tests (``BOTH_DATABASES`` below, or any test marked
``both_databases``) run once on SQLite and once on PostgreSQL: the ``db`` and ``db_url``
fixtures are parametrized by ``db_kind``. The PostgreSQL variants use the server named by
``RUNDASH_TEST_PG_URL`` when it is set; otherwise the first of them starts a throwaway
cluster on 127.0.0.1 (``tests/pg_cluster.py``), stopped and removed when the session ends.
Nothing is skipped for want of PostgreSQL: a cluster that cannot start fails those tests
saying why. ``--sqlite-only`` deselects them on purpose.

Browser tests (any test using dash's ``dash_duo``, or marked ``browser``) fail in one line
naming what to install when Chromium or its chromedriver is missing.
"""

from __future__ import annotations

import hashlib
import os
import shutil
import signal
import subprocess
import threading
import uuid
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator

import pytest

from rundash.storage.engine import open_database

DB_KINDS = ("sqlite", "postgresql")
PG_ENV = "RUNDASH_TEST_PG_URL"
# test paths (relative to tests/) whose database tests run on both databases
BOTH_DATABASES = ("storage/", "pipeline/", "fleet/", "workflows/test_pipeline.py")


def pytest_addoption(parser):
    parser.addoption("--sqlite-only", action="store_true",
                     help="deselect the PostgreSQL variants of the database tests")


def pytest_configure(config):
    config.addinivalue_line("markers", "both_databases: run the test on SQLite and PostgreSQL")
    config.addinivalue_line("markers", "sqlite_only: a test of SQLite itself (pragmas, files)")
    config.addinivalue_line("markers", "browser: drives headless Chromium through chromedriver")


def pytest_terminal_summary(terminalreporter):
    cluster = _CLUSTER["cluster"]
    if cluster is not None:
        terminalreporter.write_line(f"PostgreSQL variants: a throwaway PostgreSQL "
                                    f"{cluster.version} cluster on 127.0.0.1 (tests/pg_cluster.py)")


def pytest_unconfigure(config):
    # runs at the end of every session, also after Ctrl-C or an internal error
    if _CLUSTER["cluster"] is not None:
        _CLUSTER["cluster"].stop()
        _CLUSTER["cluster"] = None


def _runs_on_both(definition) -> bool:
    if definition.get_closest_marker("sqlite_only"):
        return False
    if definition.get_closest_marker("both_databases"):
        return True
    rel = Path(str(definition.fspath)).resolve().relative_to(Path(__file__).resolve().parent)
    return any(rel.as_posix().startswith(p) for p in BOTH_DATABASES)


def pytest_generate_tests(metafunc):
    if "db_kind" in metafunc.fixturenames and _runs_on_both(metafunc.definition):
        metafunc.parametrize("db_kind", DB_KINDS, indirect=True)


def pytest_collection_modifyitems(config, items):
    if not config.getoption("--sqlite-only"):
        return
    keep, drop = [], []
    for item in items:
        params = getattr(getattr(item, "callspec", None), "params", {})
        (drop if "postgresql" in params.values() else keep).append(item)
    if drop:
        config.hook.pytest_deselected(items=drop)
        items[:] = keep


# the session's throwaway cluster, started by the first PostgreSQL variant that runs
_CLUSTER: dict = {"cluster": None, "error": None}


def pg_admin_url() -> str:
    """The server URL for the PostgreSQL variants: ``RUNDASH_TEST_PG_URL``, else the URL of
    the session's throwaway cluster (started on first use); fails the test saying why when
    no server can be had."""
    url = os.environ.get(PG_ENV)
    if url:
        return url
    if _CLUSTER["cluster"] is None and _CLUSTER["error"] is None:
        from tests.pg_cluster import Cluster, ClusterError

        try:
            _CLUSTER["cluster"] = Cluster().start()
        except (ClusterError, OSError, subprocess.SubprocessError) as exc:
            _CLUSTER["error"] = str(exc)
        else:
            _end_session_on_sigterm()
    if _CLUSTER["error"] is not None:
        pytest.fail(f"the PostgreSQL variant of this test needs a server, and the throwaway "
                    f"one could not start: {_CLUSTER['error']}", pytrace=False)
    return _CLUSTER["cluster"].url


def _end_session_on_sigterm() -> None:
    """Have SIGTERM end the session as Ctrl-C does, so the cluster's folder goes too (the
    server itself dies with this process in any case). Forked children keep the default."""
    if (threading.current_thread() is not threading.main_thread()
            or signal.getsignal(signal.SIGTERM) is not signal.SIG_DFL):
        return
    pid = os.getpid()

    def terminated(signum, frame):
        if os.getpid() != pid:
            signal.signal(signal.SIGTERM, signal.SIG_DFL)
            os.kill(os.getpid(), signal.SIGTERM)
            return
        raise KeyboardInterrupt("SIGTERM")

    signal.signal(signal.SIGTERM, terminated)


def require_browser() -> None:
    """Fail the calling test in one line when Chromium or chromedriver is missing."""
    missing = [name for name in ("chromium", "chromedriver") if not shutil.which(name)]
    if missing:
        pytest.fail(f"this browser test needs {' and '.join(missing)} on the PATH: install "
                    "Debian's chromium and chromium-driver (apt-get install chromium "
                    "chromium-driver), or run scripts/test, which does", pytrace=False)


@pytest.fixture(autouse=True)
def _browser_present(request):
    if "dash_duo" in request.fixturenames or request.node.get_closest_marker("browser"):
        require_browser()


@contextmanager
def fresh_database_url(kind: str, folder: Path) -> Iterator[str]:
    """A URL of a new, empty database of ``kind``, removed afterwards (PostgreSQL)."""
    if kind == "sqlite":
        yield str(folder / f"test-{uuid.uuid4().hex[:8]}.sqlite")
        return
    from sqlalchemy import create_engine, text
    from sqlalchemy.engine import make_url

    admin = make_url(pg_admin_url())
    name = f"rundash_t_{uuid.uuid4().hex[:12]}"
    eng = create_engine(admin, isolation_level="AUTOCOMMIT")
    try:
        with eng.connect() as conn:
            conn.execute(text(f'CREATE DATABASE "{name}" TEMPLATE template0'))
        yield admin.set(database=name).render_as_string(hide_password=False)
        with eng.connect() as conn:
            conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
    finally:
        eng.dispose()


@pytest.fixture
def db_kind(request) -> str:
    """sqlite, or each of sqlite and postgresql for storage and pipeline tests."""
    return getattr(request, "param", "sqlite")


@pytest.fixture
def db_url(db_kind: str, db_path: Path) -> Iterator[str]:
    """A new, empty database: the ``db_path`` file on SQLite, a new database on PostgreSQL."""
    if db_kind == "sqlite":
        yield str(db_path)
        return
    with fresh_database_url(db_kind, db_path.parent) as url:
        yield url

EXAMPLE_MACHINE = """
[machine]
name = "Test rig T-1"
kind = "compressor"
rated_speed_rpm = 6000
min_operating_speed_rpm = 5000
max_continuous_speed_rpm = 6300
trip_speed_rpm = 6900
profile = "api617"
rotation = "ccw"

[tach]
column = "tach"
pulses_per_rev = 1
edge = "rising"

[[probes]]
name = "NDE-X"
column = "x1"
kind = "proximity"
units = "um"
sensitivity_mv_per_unit = 7.874
angle_deg = 45.0
bearing = "NDE"
axis = "X"
pair = "NDE-Y"

[[probes]]
name = "NDE-Y"
column = "y1"
kind = "proximity"
units = "um"
sensitivity_mv_per_unit = 7.874
angle_deg = 135.0
bearing = "NDE"
axis = "Y"
pair = "NDE-X"

[[probes]]
name = "NDE-V"
column = "v1"
kind = "velocity"
units = "mm/s"
sensitivity_mv_per_unit = 4.0
bearing = "NDE"
"""


@pytest.fixture
def db_path(tmp_path: Path) -> Path:
    return tmp_path / "test.sqlite"


@pytest.fixture
def db(db_url: str):
    d = open_database(db_url, create=True)
    yield d
    d.dispose()


@pytest.fixture
def machine_file(tmp_path: Path) -> Path:
    p = tmp_path / "machine.toml"
    p.write_text(EXAMPLE_MACHINE, encoding="utf-8")
    return p


def db_fingerprint(db) -> str:
    """Hash of the main database file after a full WAL checkpoint.

    Uncommitted WAL frames are never checkpointed, so a rolled-back transaction leaves
    this hash unchanged.
    """
    with db.engine.connect() as conn:
        conn.exec_driver_sql("PRAGMA wal_checkpoint(TRUNCATE)")
    path = db.engine.url.database
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def run_warnings(conn, run_id: int) -> list:
    """The warnings stored with a run (read for the tests)."""
    from sqlalchemy import select

    from rundash.storage.orm import Run
    return list(conn.execute(select(Run.warnings).where(Run.id == run_id)).scalar() or [])


def count_chunks(conn, channel_id: int) -> int:
    """How many waveform chunks a channel is stored in (read for the tests)."""
    from sqlalchemy import func, select

    from rundash.storage.orm import WaveformChunk
    return conn.execute(select(func.count()).select_from(WaveformChunk)
                        .where(WaveformChunk.channel_id == channel_id)).scalar()
