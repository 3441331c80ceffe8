"""Sync throughput into PostgreSQL against PostgreSQL's own bulk load of the same blobs,
and the store's size per channel-hour.

    RUNDASH_BENCH_PG_URL=postgresql://user@127.0.0.1:5432/postgres python benchmarks/bench_sync.py

(falls back to RUNDASH_TEST_PG_URL). Builds a SQLite source of synthetic runs, syncs it
into a new PostgreSQL database, then loads the very same chunk blobs with binary COPY
and with executemany into a bare table, and prints the rates and their ratios (one run,
not asserted).
"""

from __future__ import annotations

import os
import sys
import tempfile
import time
import uuid
from datetime import datetime, timezone
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from sqlalchemy import create_engine, text  # noqa: E402
from sqlalchemy.engine import make_url  # noqa: E402

from rundash.ingest.importer import import_run  # noqa: E402
from rundash.ingest.machine_file import parse_machine_description  # noqa: E402
from rundash.storage.engine import open_database  # noqa: E402
from rundash.storage.sync import sync  # noqa: E402
from tests.fleet.helpers import MACHINE, write_run_wavs  # noqa: E402

N_RUNS, N_SAMPLES, FS = 8, 1_000_000, 10240


def main() -> int:
    admin = os.environ.get("RUNDASH_BENCH_PG_URL") or os.environ.get("RUNDASH_TEST_PG_URL")
    if not admin:
        print("set RUNDASH_BENCH_PG_URL (or RUNDASH_TEST_PG_URL) to a PostgreSQL server")
        return 1
    admin_url = make_url(admin.replace("postgresql://", "postgresql+psycopg://", 1))
    name = f"rundash_bench_{uuid.uuid4().hex[:8]}"
    eng = create_engine(admin_url, isolation_level="AUTOCOMMIT")
    with eng.connect() as c:
        c.execute(text(f'CREATE DATABASE "{name}"'))
    url = admin_url.set(database=name).render_as_string(hide_password=False)
    try:
        with tempfile.TemporaryDirectory() as tmp:
            tmp = Path(tmp)
            src = open_database(str(tmp / "src.sqlite"), create=True)
            desc = parse_machine_description(MACHINE, "m.toml")
            for k, p in enumerate(write_run_wavs(tmp, N_RUNS, n_samples=N_SAMPLES, fs=FS)):
                import_run(src, p, desc, description_text=MACHINE, label=f"bench {k}",
                           started_at=datetime(2026, 3, 1 + k, tzinfo=timezone.utc))
                p.unlink()
            with src.engine.connect() as c:
                c.exec_driver_sql("PRAGMA wal_checkpoint(TRUNCATE)")
            n_ch = 3
            ch_hours = N_RUNS * n_ch * N_SAMPLES / FS / 3600
            sqlite_bytes = (tmp / "src.sqlite").stat().st_size
            dst = open_database(url, create=True)
            t0 = time.perf_counter()
            rep = sync(src, dst)
            t_sync = time.perf_counter() - t0
            mb = rep.n_bytes / 1e6
            with dst.read() as c:
                pg_bytes = c.execute(text("SELECT pg_database_size(current_database())")).scalar()
                chunk_bytes = c.execute(text(
                    "SELECT pg_total_relation_size('waveform_chunk')")).scalar()
            # the same blobs, loaded by PostgreSQL's own bulk paths into a bare table
            with src.read() as c:
                rows = c.execute(text("SELECT channel_id, chunk_index, data FROM waveform_chunk"
                                      )).all()
            import psycopg
            dsn = make_url(url).set(drivername="postgresql").render_as_string(hide_password=False)
            with psycopg.connect(dsn) as pc:
                pc.execute("CREATE TABLE bulk (channel_id int, chunk_index int, data bytea)")
                t0 = time.perf_counter()
                with pc.cursor() as cur:
                    with cur.copy("COPY bulk (channel_id, chunk_index, data) FROM STDIN "
                                  "(FORMAT BINARY)") as cp:
                        cp.set_types(["int4", "int4", "bytea"])
                        for r in rows:
                            cp.write_row((r[0], r[1], r[2]))
                pc.commit()
                t_copy = time.perf_counter() - t0
                pc.execute("TRUNCATE bulk")
                pc.commit()
                t0 = time.perf_counter()
                with pc.cursor() as cur:
                    cur.executemany("INSERT INTO bulk VALUES (%s, %s, %s)",
                                    [(r[0], r[1], r[2]) for r in rows])
                pc.commit()
                t_many = time.perf_counter() - t0
            print(f"{N_RUNS} runs x {n_ch} channels x {N_SAMPLES} float32 samples "
                  f"({mb:.1f} MB of waveforms, {rep.n_chunks} chunks, {ch_hours:.3f} channel-h)")
            print(f"sync SQLite -> PostgreSQL : {mb / t_sync:7.1f} MB/s ({t_sync:.2f} s, "
                  "chunks + run rows, one transaction per run)")
            print(f"binary COPY, same blobs   : {mb / t_copy:7.1f} MB/s -> sync/COPY = "
                  f"{t_copy / t_sync:.2f}")
            print(f"executemany, same blobs   : {mb / t_many:7.1f} MB/s -> sync/executemany = "
                  f"{t_many / t_sync:.2f}")
            print(f"size per channel-hour at {FS} Hz: SQLite {sqlite_bytes / ch_hours / 1e6:.0f} MB,"
                  f" PostgreSQL waveform table {chunk_bytes / ch_hours / 1e6:.0f} MB "
                  f"(whole database {pg_bytes / ch_hours / 1e6:.0f} MB; raw float32 "
                  f"{4 * FS * 3600 / 1e6:.0f} MB)")
            src.dispose()
            dst.dispose()
    finally:
        with eng.connect() as c:
            c.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        eng.dispose()
    return 0


if __name__ == "__main__":
    sys.exit(main())
