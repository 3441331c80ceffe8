"""Crash safety: ``rundash import`` killed with SIGKILL at 20 seeded random moments (an
import that ends before its moment is not counted as a kill; the next is timed from it).

After every kill the SQLite file must pass ``PRAGMA integrity_check``, and every run in it
must be whole (state 'complete', every channel holding all its samples in its chunks),
absent, or marked 'incomplete' -- never a silently partial run, never one left in
'importing'. The imports go into one database, one after another, as on a site laptop
that loses power again and again; a last import must still succeed.
"""

from __future__ import annotations

import os
import random
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from tests.conftest import EXAMPLE_MACHINE

ROOT = Path(__file__).resolve().parents[1]
KILLS = 20
SEED = 20260501


def _write_csv(path: Path, n: int) -> None:
    """A CSV large enough that its import takes a second or two (pandas parses ~1e6
    values/s here): time, tach and three probe columns in volts."""
    rng = np.random.default_rng(7)
    t = np.arange(n) / 2000.0
    data = np.column_stack([t, np.where(np.mod(t * 20, 1) < 0.2, 5.0, 0.0),
                            0.2 * np.sin(2 * np.pi * 20 * t), 0.2 * np.cos(2 * np.pi * 20 * t),
                            0.01 * rng.standard_normal(n)])
    with open(path, "w", encoding="utf-8") as fh:
        fh.write("time_s,tach,x1,y1,v1\n")
        np.savetxt(fh, data, delimiter=",", fmt="%.7g")


def _env():
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    return env


def _start(data: Path, machine: Path, db: Path) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, "-m", "rundash.cli", "import", "--machine", str(machine), "--db",
         str(db), "--quiet", "--force", "--", str(data)],
        cwd=ROOT, env=_env(), stdout=subprocess.PIPE, stderr=subprocess.PIPE)


def _audit(db: Path) -> dict[str, int]:
    """Integrity check and the state of every run; raises AssertionError on damage."""
    con = sqlite3.connect(db)
    try:
        assert con.execute("PRAGMA integrity_check").fetchall() == [("ok",)]
        assert con.execute("PRAGMA foreign_key_check").fetchall() == []
        counts = {"complete": 0, "incomplete": 0}
        for run_id, state, n in con.execute("SELECT id, state, n_samples FROM run"):
            assert state in counts, f"run {run_id} left in state {state!r}"
            if state != "complete":
                counts[state] += 1
                continue
            chans = con.execute("SELECT id, n_samples FROM channel WHERE run_id = ?",
                                (run_id,)).fetchall()
            assert len(chans) == 4, f"run {run_id}: {len(chans)} channels"
            for cid, cn in chans:
                got = con.execute("SELECT COALESCE(SUM(n_samples), 0), COUNT(*) FROM "
                                  "waveform_chunk WHERE channel_id = ?", (cid,)).fetchone()
                assert cn == n and got[0] == n, f"run {run_id} channel {cid}: {got} of {n}"
            counts["complete"] += 1
        return counts
    finally:
        con.close()


@pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="needs POSIX signals")
def test_sigkill_during_import_never_leaves_a_partial_run(tmp_path):
    data = tmp_path / "big.csv"
    _write_csv(data, 240_000)
    machine = tmp_path / "machine.toml"
    machine.write_text(EXAMPLE_MACHINE, encoding="utf-8")
    db = tmp_path / "crash.sqlite"

    # a first run compiles bytecode and fills the page cache (a fresh clone in CI): time
    # the second, so that the kill delays below are fractions of a warm import
    warm = _start(data, machine, tmp_path / "warm.sqlite")
    assert warm.wait(timeout=120) == 0
    t0 = time.monotonic()
    p = _start(data, machine, db)
    out, err = p.communicate(timeout=120)
    full_s = time.monotonic() - t0
    assert p.returncode == 0, err.decode()
    assert _audit(db) == {"complete": 1, "incomplete": 0}

    rng = random.Random(SEED)
    complete = 1
    lost = 0  # kills that landed before the commit: the run must be absent
    kills = 0  # imports killed while still running (one that ended first is no kill)
    attempts = 0
    while kills < KILLS and attempts < 4 * KILLS:
        attempts += 1
        delay = rng.uniform(0.35, 1.0) * full_s  # past interpreter start-up, mostly
        t0 = time.monotonic()
        p = _start(data, machine, db)
        while p.poll() is None and time.monotonic() - t0 < delay:
            time.sleep(0.01)
        if p.poll() is None:
            p.send_signal(signal.SIGKILL)
            kills += 1
        else:  # the machine is quicker than when timed: time the next kills from this
            full_s = time.monotonic() - t0
        p.communicate(timeout=120)
        counts = _audit(db)
        assert counts["incomplete"] == 0
        if p.returncode == 0:  # finished before the kill: whole
            assert counts["complete"] == complete + 1
        else:  # killed: the run is whole (killed after its commit) or absent
            assert p.returncode == -signal.SIGKILL
            assert counts["complete"] in (complete, complete + 1)
            lost += counts["complete"] == complete
        complete = counts["complete"]
    assert kills == KILLS, (kills, attempts, full_s)
    # most kills must land inside the import for the test to mean anything
    assert lost >= KILLS // 2, (lost, complete, full_s)

    p = _start(data, machine, db)
    assert p.wait(timeout=120) == 0
    assert _audit(db)["complete"] == complete + 1
    print(f"crash safety: {KILLS} kills in {attempts} imports, {lost} before the commit "
          f"(run absent), {KILLS - lost} after it (run whole); full import {full_s:.2f} s")
