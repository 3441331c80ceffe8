"""Batch re-processing throughput: 2 Dask workers against 1, on the same runs.

    python benchmarks/bench_reprocess.py

Imports synthetic runs into a SQLite file, starts a local cluster (single-threaded
worker processes) before the clock starts, and times rundash.workflows.batch.reprocess over all
runs with 1 and then 2 workers; prints runs/s and the ratio (one run, not asserted).

Beside it, in the same run, two figures say what limits the scaling:

- each task's CPU seconds against its wall seconds (a task that waits for the database's
  write lock, or for a core taken by other work, spends wall time without CPU time);
- a compute-only reference: the same number of tasks of pure numpy work (order tracking
  of an in-memory record, no database, no files) on the same clusters, 2 workers against
  1. It is the ceiling this machine gives two processes for this kind of work (two
  virtual cores may share a physical one, memory bandwidth and turbo clocks are shared);
  the re-processing's ratio divided by it is the part the database and the scheduling
  cost.
"""

from __future__ import annotations

import os
import shutil
import sys
import tempfile
import time
from datetime import datetime, timezone
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from rundash.workflows.batch import local_cluster, reprocess  # noqa: E402
from rundash.ingest.importer import import_run  # noqa: E402
from rundash.ingest.machine_file import parse_machine_description  # noqa: E402
from rundash.storage.engine import open_database  # noqa: E402
from tests.fleet.helpers import MACHINE, write_run_wavs  # noqa: E402

N_RUNS, SECONDS, FS = 12, 120, 8192


def _warm_up(path: str) -> None:
    """A worker's one-time start-up, before the clock: the pipeline's imports, scipy.signal
    among them (imported by the first run with velocity probes, for the band filter of the
    velocity overall: about 0.3 s once per process), and the database opened."""
    from rundash.workflows.batch import _database
    import rundash.workflows.findings, rundash.workflows.pipeline  # noqa: F401
    import scipy.signal  # noqa: F401
    _database(path)


def _timed_task(url: str, run_id: int):
    """process_one with this task's CPU seconds (of its worker process, the reader thread included) beside its wall."""
    from rundash.workflows.batch import process_one
    c0, t0 = time.process_time(), time.perf_counter()
    out = process_one(url, run_id)
    return out, time.process_time() - c0, time.perf_counter() - t0


def _compute_task(seed: int) -> float:
    """Pure numpy work of about one run's size: order tracking of an in-memory record
    (the run's 3 channels, 120 s at 8192 Hz, 1200 rpm rising at 120 rpm/s)."""
    import numpy as np
    from rundash.dsp import speed_profile, track_orders
    c0 = time.process_time()
    n = SECONDS * FS
    t = np.arange(n) / FS
    theta = 20.0 * t + t ** 2
    rng = np.random.default_rng(seed)
    x = (np.cos(2 * np.pi * theta)[None, :] + 0.01 * rng.standard_normal((3, n))).astype(np.float32)
    k = np.arange(1, int(theta[-1]))
    rev_times = (-20.0 + np.sqrt(400.0 + 4.0 * k)) / 2.0
    for _ in range(4):
        track_orders(x, float(FS), speed_profile(rev_times), orders=(1, 2))
    return time.process_time() - c0


def _run_tasks(client, fn, args) -> tuple[float, list]:
    t0 = time.perf_counter()
    futs = [client.submit(fn, *a, pure=False) for a in args]
    res = client.gather(futs)
    return time.perf_counter() - t0, res


def main() -> int:
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        db = open_database(str(tmp / "base.sqlite"), create=True)
        desc = parse_machine_description(MACHINE, "m.toml")
        ids = [import_run(db, p, desc, description_text=MACHINE, label=f"r{k}",
                          started_at=datetime(2026, 4, 1 + k, tzinfo=timezone.utc)).run_id
               for k, p in enumerate(write_run_wavs(tmp, N_RUNS, n_samples=SECONDS * FS, fs=FS))]
        with db.engine.connect() as c:
            c.exec_driver_sql("PRAGMA wal_checkpoint(TRUNCATE)")
        db.dispose()
        rates, ref_rates = {}, {}
        for n in (1, 2):
            path = tmp / f"w{n}.sqlite"
            shutil.copyfile(tmp / "base.sqlite", path)
            cluster = local_cluster(n)
            try:
                from dask.distributed import Client
                with Client(cluster) as c:  # workers import the pipeline before the clock
                    c.run(_warm_up, str(tmp / "base.sqlite"))
                    c.gather([c.submit(_compute_task, 99, pure=False) for _ in range(n)])
                t0 = time.perf_counter()
                rep = reprocess(str(path), ids, scheduler=cluster.scheduler_address)
                dt = time.perf_counter() - t0
                # the same runs again, each task timed in CPU and wall seconds
                with Client(cluster) as c:
                    _, timed = _run_tasks(c, _timed_task, [(str(path), r) for r in ids])
                    ref_dt, ref_cpu = _run_tasks(c, _compute_task, [(k,) for k in range(N_RUNS)])
            finally:
                cluster.close()
            assert rep.n_ok == N_RUNS, rep.failed
            assert all(o.ok for o, _, _ in timed)
            rates[n] = N_RUNS / dt
            ref_rates[n] = N_RUNS / ref_dt
            cpu = sum(c for _, c, _ in timed)
            wall = sum(w for _, _, w in timed)
            print(f"{n} worker{'s' if n > 1 else ' '}: {rates[n]:5.2f} runs/s ({dt:.1f} s for "
                  f"{N_RUNS} runs of {SECONDS} s x 3 channels at {FS} Hz); tasks: "
                  f"{cpu:.1f} CPU-s in {wall:.1f} task-s ({cpu / wall:.0%} on a core); "
                  f"compute-only reference {ref_rates[n]:5.2f} tasks/s "
                  f"({sum(ref_cpu):.1f} CPU-s in {ref_dt:.1f} s)")
        ratio, ref_ratio = rates[2] / rates[1], ref_rates[2] / ref_rates[1]
        print(f"2 workers / 1 worker = {ratio:.2f} x (target >= 1.7 on 2 cores); the "
              f"compute-only reference in the same run: {ref_ratio:.2f} x, so the "
              f"re-processing reaches {ratio / ref_ratio:.0%} of what this machine gives two "
              f"processes; load average {os.getloadavg()[0]:.1f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
