"""rundash.storage.sync: a laptop's SQLite file -> the shared store -> a new SQLite file.

The store is SQLite and PostgreSQL in turn (``db_kind``). What must hold is checked
against the source database itself: every waveform chunk and every result byte for byte
(bit-identical floats and blobs), a second sync copying nothing, and a sync killed with
SIGKILL midway that, run again, completes without duplicates (the one-transaction-per-run
rule of DEVELOPERS.md "Conventions"; no outside reference applies to a copy).
"""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
from datetime import datetime, timezone
from pathlib import Path

import pytest

from rundash.cli import main
from rundash.workflows.demo import build_demo, sample_runs_dir
from rundash.errors import NotFoundError, StorageError
from rundash.ingest.importer import import_run
from rundash.ingest.machine_file import load_machine_description, parse_machine_description
from rundash.workflows.pipeline import ProcessingParams, process_run
from rundash.storage import queries as q
from rundash.storage.engine import open_database
from rundash.storage.sync import sync
from tests.fleet.helpers import MACHINE, dump_run, run_count, runs_by_content, write_run_wavs

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture(scope="module")
def demo_source(tmp_path_factory) -> Path:
    """The four demo runs, imported and processed, in a SQLite file (built once)."""
    path = tmp_path_factory.mktemp("src") / "site.sqlite"
    db = open_database(str(path), create=True)
    build_demo(db, process=True)
    with db.engine.connect() as conn:
        conn.exec_driver_sql("PRAGMA wal_checkpoint(TRUNCATE)")
    db.dispose()
    return path


@pytest.fixture
def source(demo_source, tmp_path):
    p = tmp_path / "laptop.sqlite"
    shutil.copyfile(demo_source, p)
    db = open_database(str(p), create=True)
    yield db
    db.dispose()


@pytest.fixture
def store(db):
    return db  # SQLite or PostgreSQL, fresh (tests/conftest.py)


def _assert_same_runs(a, b):
    ra, rb = runs_by_content(a), runs_by_content(b)
    assert set(ra) == set(rb)
    for h, ia in ra.items():
        da, db_ = dump_run(a, ia), dump_run(b, rb[h])
        assert da.keys() == db_.keys()
        for key in da:
            assert da[key] == db_[key], f"run {ia}: {key} differs"


class TestRoundTrip:
    def test_sqlite_store_sqlite_is_bit_identical_and_resync_copies_nothing(
            self, source, store, tmp_path):
        first = sync(source, store)
        assert first.count("copied") == 4 and first.machines_created == [
            "Tarnwick K-410 booster compressor"]
        assert first.n_chunks > 0 and first.n_bytes > 4 * 1_000_000
        laptop2 = open_database(str(tmp_path / "second-laptop.sqlite"), create=True)
        back = sync(store, laptop2, machine="Tarnwick K-410 booster compressor")
        assert back.count("copied") == 4
        # chunks, runs, channels and every result table: equal bit for bit
        _assert_same_runs(source, store)
        _assert_same_runs(source, laptop2)
        with laptop2.read() as conn:  # findings JSON names the run's id in its own database
            for r in q.list_runs(conn):
                assert q.load_processing(conn, r.id).findings["run"]["id"] == r.id
        for again in (sync(source, store), sync(store, laptop2)):
            assert again.count("skipped") == 4 and again.count("copied") == 0
            assert again.n_chunks == 0 and again.n_bytes == 0
        assert run_count(store) == 4 and run_count(laptop2) == 4
        laptop2.dispose()

    def test_newer_results_replace_older_ones(self, source, store):
        sync(source, store)
        with source.read() as conn:
            rid = q.list_runs(conn)[-1].id
        process_run(source, rid, params=ProcessingParams(orders=(1.0,)))
        rep = sync(source, store)
        assert [r.action for r in rep.runs].count("results updated") == 1
        assert next(r for r in rep.runs if r.action == "results updated").source_run_id == rid
        _assert_same_runs(source, store)
        assert sync(source, store).count("skipped") == 4


class TestConflicts:
    def test_same_name_other_content_is_reported_and_left_alone(self, source, store):
        with source.read() as conn:
            runs = sorted(q.list_runs(conn), key=lambda r: r.id)
        first, second = runs[0], runs[1]
        # the store already holds a run named like the first one, made from another file
        desc, text = load_machine_description(sample_runs_dir() / "tarnwick-k410.toml")
        other = sample_runs_dir() / second.source_name
        res = import_run(store, other, desc, description_text=text, label=first.label,
                         started_at=first.started_at)
        before = dump_run(store, res.run_id)
        rep = sync(source, store)
        by_src = {r.source_run_id: r for r in rep.runs}
        assert by_src[first.id].action == "conflict"
        assert by_src[first.id].destination_run_id == res.run_id
        assert "same name" in by_src[first.id].reason
        # the store's run holds the second run's file but another start time: not the same
        # run, so the second run is copied beside it
        assert [by_src[r.id].action for r in runs[1:]] == ["copied", "copied", "copied"]
        after = dump_run(store, res.run_id)
        assert after["chunks"] == before["chunks"] and after["run"] == before["run"]

    def test_unknown_machine_and_same_database_are_errors(self, source, store):
        with pytest.raises(NotFoundError, match="no machine named 'nope'"):
            sync(source, store, machine="nope")
        with pytest.raises(StorageError, match="same database"):
            sync(source, source)


@pytest.fixture(scope="module")
def many_runs(tmp_path_factory) -> Path:
    """16 small runs of distinct content in a SQLite file (not processed; only read)."""
    tmp_path = tmp_path_factory.mktemp("many")
    path = tmp_path / "many.sqlite"
    db = open_database(str(path), create=True)
    desc = parse_machine_description(MACHINE, "m.toml")
    for k, p in enumerate(write_run_wavs(tmp_path, 16, n_samples=400_000, seed=9)):
        import_run(db, p, desc, description_text=MACHINE, label=f"run {k}",
                   started_at=datetime(2026, 1, 1 + k, tzinfo=timezone.utc))
    db.dispose()
    return path


class TestInterrupted:
    def test_killed_sync_restarted_completes_without_duplicates(self, many_runs, db_url):
        env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
        cmd = [sys.executable, "-m", "rundash.cli", "sync", "--from", str(many_runs),
               "--to", db_url, "--quiet"]
        proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                                env=env, cwd=ROOT)
        copied = 0
        for line in proc.stdout:
            copied += line.startswith("copied")
            if copied == 2:
                proc.send_signal(signal.SIGKILL)  # midway: no chance to clean up
                break
        proc.wait(timeout=60)
        assert proc.returncode == -signal.SIGKILL, proc.stderr.read()
        src, dst = open_database(str(many_runs), create=True), open_database(db_url, create=True)
        landed = run_count(dst)
        assert 2 <= landed < 16  # whole runs only: the one in flight rolled back
        for h, rid in runs_by_content(dst).items():  # every landed run complete
            assert dump_run(dst, rid)["chunks"] == dump_run(src, runs_by_content(src)[h])["chunks"]
        rep = sync(src, dst)
        assert rep.count("skipped") == landed and rep.count("copied") == 16 - landed
        assert run_count(dst) == 16 and len(runs_by_content(dst)) == 16
        _assert_same_runs(src, dst)
        src.dispose()
        dst.dispose()


class TestCommand:
    def test_cli_prints_one_line_per_run_and_a_summary(self, source, db_url, capsys):
        assert main(["sync", "--from", source.url, "--to", db_url, "--quiet"]) == 0
        out = capsys.readouterr().out
        assert out.count("\ncopied") + out.startswith("copied") == 4
        assert "4 copied, 0 with results updated, 0 skipped" in out
        assert main(["sync", "--from", source.url, "--to", db_url, "--quiet", "--json"]) == 0
        import json
        rep = json.loads(capsys.readouterr().out)
        assert rep["counts"]["skipped"] == 4 and rep["n_bytes"] == 0

    def test_cli_error_is_one_line(self, source, db_url, capsys):
        assert main(["sync", "--from", source.url, "--to", db_url, "--machine", "nope"]) == 1
        err = capsys.readouterr().err.strip()
        assert err.startswith("rundash sync: error: no machine named 'nope'") and "\n" not in err
