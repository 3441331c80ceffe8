"""Shared fixtures: databases are built by running the migrations, never by create_all."""

from __future__ import annotations

import hashlib
from pathlib import Path

import pytest

from rundash.storage.engine import open_database

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
def db(db_path: Path):
    d = open_database(str(db_path))
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
