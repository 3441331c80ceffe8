"""rundash.workflows.batch: 20 small runs re-processed on a local Dask cluster of 2 worker
processes must give what one sequential process_run per run gives (the pipeline's own
results are the reference), a run that cannot be processed is reported without stopping
the others, and a worker killed mid-task leaves no half-written results (one write
transaction per run, DEVELOPERS.md "Conventions") with the run retried or reported."""

from __future__ import annotations

import os
import shutil
import signal
import threading
import time
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pytest
from scipy.io import wavfile

from rundash.workflows.batch import local_cluster, reprocess
from rundash.cli import main
from rundash.ingest.importer import import_run
from rundash.ingest.machine_file import parse_machine_description
from rundash.workflows.pipeline import process_run
from rundash.storage.engine import open_database
from tests.fleet.helpers import MACHINE, dump_run, write_run_wavs

N_RUNS = 20
RESULT_TABLES = ("tach_pulses", "processing", "speed_profile", "vector_track", "cascade",
                 "finding")


def _results(db, run_id):
    d = dump_run(db, run_id)
    out = {}
    for t in RESULT_TABLES:  # created_at is when, not what: left out
        out[t] = [tuple(kv for kv in row if kv[0] != "created_at") for row in d[t]]
    return out


@pytest.fixture(scope="module")
def store(tmp_path_factory):
    """20 distinct 12 s runs plus one with a dead tach, imported, unprocessed (SQLite)."""
    tmp = tmp_path_factory.mktemp("batch")
    path = tmp / "fleet.sqlite"
    db = open_database(str(path), create=True)
    desc = parse_machine_description(MACHINE, "m.toml")
    ids = []
    for k, p in enumerate(write_run_wavs(tmp, N_RUNS, n_samples=12 * 2048, seed=4)):
        ids.append(import_run(db, p, desc, description_text=MACHINE, label=f"run {k}",
                              started_at=datetime(2026, 2, 1 + k, tzinfo=timezone.utc)).run_id)
    dead = tmp / "dead.wav"
    x = np.random.default_rng(5).standard_normal((3, 12 * 2048)).astype(np.float32) * 1e-3
    x[0] = 0.0
    wavfile.write(dead, 2048, x.T)
    bad = import_run(db, dead, desc, description_text=MACHINE, label="dead tach").run_id
    db.dispose()
    return path, ids, bad


@pytest.fixture(scope="module")
def sequential(store, tmp_path_factory):
    """The reference: each run processed one after another in this process."""
    path, ids, _ = store
    p = tmp_path_factory.mktemp("seq") / "seq.sqlite"
    shutil.copyfile(path, p)
    db = open_database(str(p), create=True)
    for rid in ids:
        process_run(db, rid)
    yield db
    db.dispose()


def _copy(store, tmp_path):
    path, ids, bad = store
    p = tmp_path / "work.sqlite"
    shutil.copyfile(path, p)
    return open_database(str(p), create=True), ids, bad


class TestReprocess:
    def test_parallel_equals_sequential_and_a_bad_run_is_reported(self, store, sequential,
                                                                  tmp_path):
        db, ids, bad = _copy(store, tmp_path)
        lines = []
        rep = reprocess(db.url, ids + [bad], workers=2, log=lines.append)
        assert rep.n_workers == 2 and len(rep.outcomes) == N_RUNS + 1 and len(lines) == N_RUNS + 1
        assert [o.run_id for o in rep.outcomes] == ids + [bad]
        assert rep.n_ok == N_RUNS
        (failed,) = rep.failed
        assert failed.run_id == bad and "Error" in failed.error
        for rid in ids:
            assert _results(db, rid) == _results(sequential, rid), f"run {rid}"
        assert _results(db, bad)["processing"] == []  # nothing half-written
        db.dispose()

    def test_worker_killed_mid_task_retries_or_reports_and_writes_nothing_half(
            self, store, sequential, tmp_path):
        db, ids, _ = _copy(store, tmp_path)
        from dask.distributed import Client
        cluster = local_cluster(2)
        client = Client(cluster)
        out = {}
        th = threading.Thread(target=lambda: out.setdefault(
            "rep", reprocess(db.url, ids, scheduler=cluster.scheduler_address)))
        th.start()
        killed = None
        t_end = time.monotonic() + 60
        while killed is None and time.monotonic() < t_end:
            busy = {w: ts for w, ts in client.processing().items() if ts}
            if busy:
                pids = client.run(os.getpid)
                victim = sorted(busy)[0]
                os.kill(pids[victim], signal.SIGKILL)
                killed = victim
            else:
                time.sleep(0.02)
        th.join(timeout=180)
        client.close()
        cluster.close()
        assert killed is not None and not th.is_alive()
        rep = out["rep"]
        assert len(rep.outcomes) == N_RUNS
        for o in rep.outcomes:
            if o.ok:  # retried on a live worker: whole results, equal to the reference
                assert _results(db, o.run_id) == _results(sequential, o.run_id)
            else:  # reported: and its results are none, not a part
                assert "KilledWorker" in o.error
                assert _results(db, o.run_id)["processing"] == []
        assert rep.n_ok >= N_RUNS - 1
        db.dispose()

    def test_command_needs_a_selection_and_prints_a_summary(self, store, tmp_path, capsys):
        db, ids, bad = _copy(store, tmp_path)
        assert main(["reprocess", "--db", db.url, "--machine", "nope", "--quiet"]) == 1
        assert "no complete runs to process for machine 'nope'" in capsys.readouterr().err
        code = main(["reprocess", "--db", db.url, "--all", "--workers", "2", "--quiet",
                     "--orders", "1"])
        out = capsys.readouterr().out
        assert code == 1  # the dead-tach run failed
        assert f"{N_RUNS} of {N_RUNS + 1} runs processed, 1 failed" in out
        assert f"failed: run {bad}: FAILED" in out
        assert "advisory" in out.lower()
        db.dispose()
