"""A processed demo run whose findings have known values (invented, round numbers), built
once per session and copied for each test that changes it."""

from __future__ import annotations

import shutil
from pathlib import Path
from types import SimpleNamespace

import pytest

from rundash.storage.engine import open_database
from tests.dashboard.conftest import make_findings


def review_findings(run_id: int, machine: str) -> dict:
    """The dashboard tests' findings with K410-DE-Y moved inside the operating range
    (5,000 rpm in 4,400-5,460: its margin fails) and no limit exceeded, so the run fails
    on that critical alone."""
    f = make_findings(run_id, machine)
    for c in f["criticals"]:
        if c["probe"] == "K410-DE-Y":
            c.update(speed_rpm=5000.0, peak_speed_rpm=5000.0, band_rpm=[4800.0, 5200.0],
                     side="inside", separation_margin_pct=None, required_margin_pct=None,
                     margin_verdict="fail", reference_speed_rpm=None)
    f["limits"] = [x for x in f["limits"] if x["verdict"] != "exceeds"]
    f["processing"] = {"speed_range_rpm": [150.0, 5460.0]}
    f["probes"] = [{"name": n} for n in ("K410-DE-X", "K410-DE-Y", "K410-NDE-X",
                                         "K410-NDE-Y", "K410-DE-VEL")]
    f["run_verdict"] = "fail"
    return f


@pytest.fixture(scope="session")
def reviewed_source(tmp_path_factory) -> SimpleNamespace:
    from rundash.ingest.importer import import_run
    from rundash.ingest.machine_file import load_machine_description
    from rundash.storage import queries as q
    from rundash.workflows.demo import sample_runs_dir
    from rundash.workflows.pipeline import process_run

    folder = sample_runs_dir()
    desc, text = load_machine_description(folder / "tarnwick-k410.toml")
    path = tmp_path_factory.mktemp("review") / "source.sqlite"
    db = open_database(str(path), create=True)
    res = import_run(db, folder / "k410_2023_up.wav", desc, description_text=text,
                     label="First start (review test)", cycle="2023 overhaul", kind="run-up")
    process_run(db, res.run_id)
    with db.write() as conn:
        q.save_findings_json(conn, res.run_id, review_findings(res.run_id, desc.machine.name))
    with db.engine.connect() as conn:
        conn.exec_driver_sql("PRAGMA wal_checkpoint(TRUNCATE)")
    db.dispose()
    return SimpleNamespace(path=path, run_id=res.run_id, machine=desc.machine.name)


@pytest.fixture
def reviewed(reviewed_source, tmp_path) -> SimpleNamespace:
    """A fresh copy of the processed run's database."""
    p = Path(tmp_path) / "review.sqlite"
    shutil.copyfile(reviewed_source.path, p)
    db = open_database(str(p))
    yield SimpleNamespace(db=db, path=p, run_id=reviewed_source.run_id,
                          machine=reviewed_source.machine)
    db.dispose()
