"""The public Python API (rundash/api.py) on the demo database, and the README's
notebook example run as written.

Ground truth for the verdicts: sample_runs/README.md, "Verdicts to expect" (written with
the generator, sample_runs/generate.py, which does not import rundash): every margin of
the critical speeds inside the runs passes in both cycles. The mechanical-running-test
vibration limit that the same page says fails in 2025 applies only to a run marked as a
shop test (README, "Scope": the demo's runs are field runs and its trip test a trip
test), so it is reference only there and every demo run passes.
"""

from __future__ import annotations

import os
import re
import sqlite3
import subprocess
import sys
import warnings
from pathlib import Path

import numpy as np
import pytest

import rundash
from rundash import CAUTION
from rundash.errors import (
    AnalysisError, ConfigError, DspError, InputError, NoDatabaseError, NotFoundError,
    RundashWarning, StorageError, TachError,
)
from rundash.storage import queries as q
from rundash.storage.engine import head_revision, open_database
from rundash.workflows.demo import build_demo, sample_runs_dir

ROOT = Path(__file__).resolve().parents[1]
EXPECTED = {"2023": "pass", "2025": "pass"}  # see the module docstring


@pytest.fixture(scope="module")
def demo_path(tmp_path_factory):
    folder = tmp_path_factory.mktemp("api")
    path = folder / "rundash-demo.sqlite"
    db = open_database(str(path), create=True)
    build_demo(db)
    db.dispose()
    return path


@pytest.fixture
def demo(demo_path):
    with rundash.open(demo_path) as db:
        yield db


def readme_example() -> str:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    m = re.search(r"<!-- python-example: demo -->\n```python\n(.*?)```", text, re.S)
    assert m, "README.md: the Python example block is missing"
    return m.group(1)


class TestReadmeExample:
    def test_runs_and_prints_the_demo_verdicts(self, demo_path):
        # a fresh interpreter in the folder holding the demo database, as a notebook would
        out = subprocess.run([sys.executable, "-c", readme_example()], cwd=demo_path.parent,
                             capture_output=True, text=True, timeout=300)
        assert out.returncode == 0, out.stderr
        lines = re.findall(r"^run (\d+), (\d{4}) [^,]*, ([a-z-]+): (pass|fail|not judged)$",
                           out.stdout, re.M)
        assert len(lines) == 4
        for _, cycle, _, verdict in lines:
            assert verdict == EXPECTED[cycle], lines
        assert "DE-X 1X peak" in out.stdout and " um pp at " in out.stdout
        assert "{(1, 3): 'changed'}" in out.stdout
        assert CAUTION in out.stdout
        assert out.stderr == ""  # no warning, no upgrade line: a demo at the newest schema


class TestOpen:
    def test_a_missing_file_is_an_error_and_nothing_is_made(self, tmp_path):
        path = tmp_path / "typo.sqlite"
        with pytest.raises(NoDatabaseError, match="no database at"):
            rundash.open(path)
        assert not path.exists()
        with pytest.raises(LookupError):  # ordinary code catches it
            rundash.open(path)
        with rundash.open(path, create=True) as db:
            assert db.runs().empty and db.machines().empty
        assert path.exists()

    @staticmethod
    def _old(path):
        from alembic import command
        from sqlalchemy import create_engine

        from rundash.storage.engine import _script
        eng = create_engine(f"sqlite:///{path}")
        cfg, _ = _script()
        with eng.connect() as conn:
            cfg.attributes["connection"] = conn
            command.upgrade(cfg, "0002")
            conn.commit()
        eng.dispose()

    @staticmethod
    def _revision(path):
        with sqlite3.connect(path) as c:
            return c.execute("SELECT version_num FROM alembic_version").fetchone()[0]

    def test_an_older_schema_says_what_it_does_and_can_be_declined(self, tmp_path, capsys):
        path = tmp_path / "old.sqlite"
        self._old(path)
        with pytest.raises(StorageError, match="older rundash schema"):
            rundash.open(path, upgrade=False)
        assert self._revision(path) == "0002"
        assert capsys.readouterr().err == ""
        rundash.open(path).close()
        assert capsys.readouterr().err.strip() == (
            f"upgrading the database schema of {path} from revision '0002' to "
            f"'{head_revision()}' (in place; no revision destroys data)")
        assert self._revision(path) == head_revision()


class TestTables:
    def test_machines_and_runs(self, demo, demo_path):
        m = demo.machines()
        assert list(m.name) == ["Tarnwick K-410 booster compressor"]
        assert m.n_runs.iloc[0] == 4 and m.n_probes.iloc[0] == 5
        runs = demo.runs()
        assert list(runs.id) == [1, 2, 3, 4]
        assert runs.started_at.is_monotonic_increasing
        assert str(runs.started_at.dt.tz) == "UTC"
        for r in runs.itertuples():
            assert r.verdict == EXPECTED[r.cycle[:4]]
        assert len(demo.runs(machine="no such machine")) == 0

    def test_vectors_are_the_stored_ones_with_direction_and_units(self, demo):
        run = demo.run(1)
        with warnings.catch_warnings():
            warnings.simplefilter("error", RundashWarning)  # the demo has a slow-roll window
            v = run.vectors(order=1)
        with demo.database.read() as conn:
            tracks = q.load_tracks(conn, 1, order=1.0)
        kinds = {}
        for t in tracks:
            kinds[t.probe_name] = t.kind
            want_comp = t.kind == "proximity"  # slow roll is subtracted from proximity only
            if t.compensated != want_comp:
                continue
            sel = v[v.probe == t.probe_name]
            assert set(sel.compensated) == {want_comp}
            np.testing.assert_array_equal(sel.amplitude.to_numpy(), t.amplitude)
            np.testing.assert_array_equal(sel.phase_lag_deg.to_numpy(), t.phase_lag_deg)
        assert set(v.probe) == set(kinds)
        assert {"direction", "amplitude_unit", "amplitude_convention"} <= set(v.columns)
        assert set(v[v.kind == "velocity"].amplitude_unit) == {"mm/s"}
        raw = run.vectors(order=[1, 2], compensated=False)
        assert not raw.compensated.any() and set(raw.order) == {1.0, 2.0}

    def test_speed_and_cascade(self, demo):
        run = demo.run(2)
        s = run.speed()
        assert (s.direction == "coast-down").mean() > 0.5
        c = run.cascade(probe="K410-DE-Y")
        assert set(c.probe) == {"K410-DE-Y"} and (c.amplitude >= 0).all()

    def test_findings(self, demo):
        with demo.database.read() as conn:
            stored = q.load_processing(conn, 3).findings
        f = demo.run(3).findings()
        assert f.verdict == stored["run_verdict"] == EXPECTED["2025"]
        assert len(f.criticals) == len(stored["criticals"])
        assert list(f.criticals.speed_rpm) == [c["speed_rpm"] for c in stored["criticals"]]
        assert len(f.limits) == len(stored["limits"])
        assert f.caution == CAUTION and set(f.criticals.caution) == {CAUTION}
        import json
        assert json.loads(f.to_json()) == stored

    def test_compare(self, demo):
        c = rundash.compare(demo, [1, 3], n_boot=10)
        assert c.verdicts == {(1, 3): "changed"}
        assert set(c.table.caution) == {CAUTION} and c.caution == CAUTION
        assert not c.table.empty

    def test_a_missing_run(self, demo):
        with pytest.raises(NotFoundError, match="no run with id 99"):
            demo.run(99)


class TestImportAndProcess:
    def test_import_file_then_process(self, tmp_path):
        folder = sample_runs_dir()
        path = tmp_path / "new.sqlite"
        run = rundash.import_file(path, folder / "k410_2023_down.wav",
                                  folder / "tarnwick-k410.toml", label="api import",
                                  cycle="2023 overhaul", kind="coast-down")
        assert not run.processed and run.label == "api import"
        with pytest.raises(NotFoundError, match="no findings yet"):
            run.findings()
        f = rundash.process(run.db, run.id)
        assert f.verdict == EXPECTED["2023"]
        assert run.db.run(run.id).findings().verdict == f.verdict
        with pytest.raises(StorageError, match="imported before"):  # the same file twice
            rundash.import_file(run.db, folder / "k410_2023_down.wav",
                                folder / "tarnwick-k410.toml")
        run.db.close()

    def test_calls_given_a_path_close_the_database_they_open(self, demo_path):
        """process and compare given a path leave no connection to the file open (the
        process's open files, read by psutil, no longer list it)."""
        import psutil

        def open_on_file():
            return [f.path for f in psutil.Process().open_files()
                    if os.path.basename(f.path).startswith(os.path.basename(str(demo_path)))]

        assert open_on_file() == []
        c = rundash.compare(demo_path, [1, 3], n_boot=5)
        assert c.verdicts == {(1, 3): "changed"}
        assert open_on_file() == []
        f = rundash.process(demo_path, 2)
        assert open_on_file() == []
        with rundash.open(demo_path) as db:
            assert db.run(2).findings().verdict == f.verdict

    def test_a_bad_machine_file_is_a_value_error(self, tmp_path):
        bad = tmp_path / "m.toml"
        bad.write_text("[machine]\nname = 'x'\n", encoding="utf-8")
        with pytest.raises(ValueError, match="m.toml"):
            rundash.import_file(tmp_path / "x.sqlite", sample_runs_dir() / "k410_2023_up.wav",
                                bad)


@pytest.mark.parametrize("cls", [ConfigError, InputError, DspError, TachError, AnalysisError])
def test_value_errors_are_value_errors(cls):
    assert issubclass(cls, ValueError) and issubclass(cls, rundash.errors.RundashError)


def test_not_found_is_a_lookup_error_and_storage_is_not_a_value_error():
    assert issubclass(NotFoundError, LookupError) and issubclass(NoDatabaseError, LookupError)
    assert not issubclass(StorageError, ValueError)


def test_an_option_error_is_one_line_not_argparse_usage(tmp_path, capsys):
    # a ValueError from an option's type would become argparse's usage error (exit 2)
    from rundash.cli import main

    assert main(["process", "1", "--db", str(tmp_path / "x.sqlite"), "--orders", "x"]) == 1
    err = capsys.readouterr().err.strip()
    assert err.startswith("rundash process: error: Invalid value for '--orders'")
    assert "usage:" not in err


def test_dir_lists_the_api():
    assert {"open", "import_file", "process", "compare"} <= set(dir(rundash))
    with pytest.raises(AttributeError):
        rundash.no_such_name  # noqa: B018
    assert os.path.basename(rundash.open.__module__) == "rundash.api"
