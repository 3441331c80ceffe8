"""Shared fixtures: databases are built by running the migrations, never by create_all.

Storage and pipeline tests (``BOTH_DATABASES`` below, or any test marked
``both_databases``) run once on SQLite and once on PostgreSQL: the ``db`` and ``db_url``
fixtures are parametrized by ``db_kind``. The PostgreSQL variants need a server named by
``RUNDASH_TEST_PG_URL`` (``.ci/run`` starts a throwaway one); without it they fail with a
message saying so. ``--sqlite-only`` deselects them on purpose.
"""

from __future__ import annotations

import hashlib
import os
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


def pg_admin_url() -> str:
    """The server URL for the PostgreSQL variants; fails the test when none is given."""
    url = os.environ.get(PG_ENV)
    if not url:
        where = "in CI" if os.environ.get("CI") == "true" else "here"
        pytest.fail(f"{PG_ENV} is not set {where}: the PostgreSQL variant of this test needs "
                    "a server (source .ci/postgres.sh to start a throwaway one), or run "
                    "pytest with --sqlite-only to deselect the PostgreSQL variants",
                    pytrace=False)
    return url


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
