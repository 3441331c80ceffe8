"""Batch re-processing throughput: 2 Dask workers against 1, on the same runs.

    python benchmarks/bench_reprocess.py

Imports synthetic runs into a SQLite file, starts a local cluster (single-threaded
worker processes) before the clock starts, and times rundash.workflows.batch.reprocess over all
runs with 1 and then 2 workers; prints runs/s and the ratio (one run, not asserted).
"""

from __future__ import annotations

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
    from rundash.workflows.batch import _database
    import rundash.workflows.findings, rundash.workflows.pipeline  # noqa: F401
    _database(path)


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
        rates = {}
        for n in (1, 2):
            path = tmp / f"w{n}.sqlite"
            shutil.copyfile(tmp / "base.sqlite", path)
            cluster = local_cluster(n)
            try:
                from dask.distributed import Client
                with Client(cluster) as c:  # workers import the pipeline before the clock
                    c.run(_warm_up, str(tmp / "base.sqlite"))
                t0 = time.perf_counter()
                rep = reprocess(str(path), ids, scheduler=cluster.scheduler_address)
                dt = time.perf_counter() - t0
            finally:
                cluster.close()
            assert rep.n_ok == N_RUNS, rep.failed
            rates[n] = N_RUNS / dt
            print(f"{n} worker{'s' if n > 1 else ' '}: {rates[n]:5.2f} runs/s ({dt:.1f} s for "
                  f"{N_RUNS} runs of {SECONDS} s x 3 channels at {FS} Hz)")
        print(f"2 workers / 1 worker = {rates[2] / rates[1]:.2f} x (target >= 1.7 on 2 cores)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
