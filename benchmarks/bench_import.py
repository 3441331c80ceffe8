"""Import throughput and memory, as ratios measured in one run.

- binary formats (WAV, HDF5, Parquet, MDF4): rundash import rate / raw SQLite blob-write
  rate of the same samples (sqlite3 executemany of float32 chunk blobs, one transaction,
  same index) — target >= 0.5;
- CSV: rundash import rate / pandas.read_csv parse rate of the same file — target >= 0.5
  (once with [data].sample_rate_hz, once with a time column the reader fits and checks);
- with --big: peak RSS of `rundash import` of a ~2 GB CSV in a child process — target
  < 500 MB;
- with --wide: peak RSS of `rundash import` of a 1000-column CSV where four columns are
  used — target < 300 MB.

Usage: python benchmarks/bench_import.py [--seconds 60] [--big] [--wide]
"""

from __future__ import annotations

import argparse
import os
import sqlite3
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

N_CH = 16
FS = 25600.0
CHUNK = 1 << 16


def machine_toml(path: Path, fmt: str, columns: list[str], tach: str, extra: str = "") -> Path:
    probes = "\n".join(
        f'[[probes]]\nname = "P{i}"\ncolumn = "{c}"\nkind = "proximity"\nunits = "um"\n'
        for i, c in enumerate(columns))
    path.write_text(f"""
[machine]
name = "Bench"
kind = "compressor"
rated_speed_rpm = 9000
min_operating_speed_rpm = 8000
max_continuous_speed_rpm = 9500

[tach]
column = "{tach}"

{probes}
[data]
format = "{fmt}"
signal_units = "engineering"
{extra}
""")
    return path


def raw_blob_write_rate(x: np.ndarray, db: Path) -> float:
    for f in (db, Path(str(db) + "-wal"), Path(str(db) + "-shm")):
        f.unlink(missing_ok=True)
    con = sqlite3.connect(db, isolation_level=None)
    con.execute("PRAGMA journal_mode=WAL")
    con.execute("PRAGMA synchronous=NORMAL")
    con.execute("CREATE TABLE c (id INTEGER PRIMARY KEY, ch INT, k INT, s INT, n INT, "
                "fs REAL, data BLOB, UNIQUE (ch, k))")
    t0, c0 = time.perf_counter(), time.process_time()
    con.execute("BEGIN IMMEDIATE")
    for k, s in enumerate(range(0, x.shape[1], CHUNK)):
        blk = x[:, s:s + CHUNK].astype("<f4")
        con.executemany("INSERT INTO c (ch, k, s, n, fs, data) VALUES (?,?,?,?,?,?)",
                        [(i, k, s, blk.shape[1], FS, blk[i].tobytes()) for i in range(N_CH)])
    con.execute("COMMIT")
    dt, dc = time.perf_counter() - t0, time.process_time() - c0
    con.close()
    return x.size / dt, x.size / dc


def our_import_rate(data: Path, machine: Path, db: Path) -> float:
    """Samples/s of import_run alone (the database is created before the clock starts)."""
    from rundash.ingest.importer import import_run
    from rundash.ingest.machine_file import load_machine_description
    from rundash.storage.engine import open_database
    desc, text = load_machine_description(machine)
    for f in db.parent.glob(db.name + "*"):
        f.unlink()
    d = open_database(str(db), create=True)
    t0, c0 = time.perf_counter(), time.process_time()
    res = import_run(d, data, desc)
    dt, dc = time.perf_counter() - t0, time.process_time() - c0
    d.dispose()
    k = res.n_samples * res.n_channels
    return k / dt, k / dc


def interleaved(ours, baseline, repeats: int):
    """Best (wall, CPU) rates of each over ``repeats`` alternating runs: on a shared,
    loaded machine the best run is the one least disturbed, and alternating keeps both
    under the same load. CPU rates count the CPU seconds of all threads of this process
    (the import reads ahead and hashes in threads), which a loaded machine disturbs less
    than wall time."""
    bo, bb = [0.0, 0.0], [0.0, 0.0]
    for _ in range(repeats):
        bb = [max(a, b) for a, b in zip(bb, baseline())]
        bo = [max(a, b) for a, b in zip(bo, ours())]
    return bo, bb


def report(name: str, ours, base, what: str) -> None:
    print(f"{name:27s} {ours[0] / 1e6:7.1f} M samples/s vs {what} {base[0] / 1e6:7.1f} M/s: "
          f"ratio {ours[0] / base[0]:5.2f} wall, {ours[1] / base[1]:5.2f} CPU (target >= 0.5)")


CHILD = """
import sys
from rundash.cli import main
rc = main(sys.argv[1:])
with open("/proc/self/status") as fh:  # this address space's peak (ru_maxrss would carry
    kb = next(int(l.split()[1]) for l in fh if l.startswith("VmHWM:"))  # the parent's)
print(kb // 1024, file=sys.stderr)
sys.exit(rc)
"""


def child_import_peak_mb(data: Path, machine: Path, db: Path) -> tuple[float, int]:
    """(seconds, peak RSS in MB) of `rundash import` in a child process."""
    t0 = time.perf_counter()
    out = subprocess.run([sys.executable, "-c", CHILD, "import", str(data), "--machine",
                          str(machine), "--db", str(db), "--quiet"], check=True,
                         capture_output=True, text=True)
    return time.perf_counter() - t0, int(out.stderr.strip().splitlines()[-1])


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--seconds", type=float, default=30.0, help="record length (16 ch, 25.6 kHz)")
    ap.add_argument("--repeats", type=int, default=3, help="alternating runs per format")
    ap.add_argument("--big", action="store_true", help="also the 2 GB CSV memory check")
    ap.add_argument("--wide", action="store_true",
                    help="also the 1000-column CSV memory check")
    a = ap.parse_args()
    n = int(a.seconds * FS)
    rng = np.random.default_rng(0)
    x = rng.standard_normal((N_CH, n)).astype(np.float32)
    names = [f"c{i}" for i in range(N_CH)]
    with tempfile.TemporaryDirectory() as td:
        td = Path(td)
        print(f"record: {N_CH} channels x {n} samples ({x.nbytes / 1e6:.0f} MB float32); "
              f"best of {a.repeats} alternating runs each")

        def raw() -> float:
            return raw_blob_write_rate(x, td / "raw.sqlite")

        from scipy.io import wavfile
        wav = td / "r.wav"
        wavfile.write(wav, int(FS), x.T.copy())
        m = machine_toml(td / "mw.toml", "wav", [f"ch{i + 2}" for i in range(N_CH - 1)], "ch1")
        our_import_rate(wav, m, td / "warm.sqlite")  # one-off module imports, untimed
        report("WAV import (float32):", *interleaved(
            lambda: our_import_rate(wav, m, td / "w.sqlite"), raw, a.repeats), "raw blob write")

        import h5py
        h5 = td / "r.h5"
        with h5py.File(h5, "w") as f:
            f.attrs["sample_rate_hz"] = FS
            for nm, s in zip(names, x):
                f.create_dataset(nm, data=s)
        mh = machine_toml(td / "mh.toml", "hdf5", names[1:], names[0])
        report("HDF5 import:", *interleaved(
            lambda: our_import_rate(h5, mh, td / "h.sqlite"), raw, a.repeats), "raw blob write")

        import pyarrow as pa
        import pyarrow.parquet as pq
        pqf = td / "r.parquet"
        pq.write_table(pa.table({nm: s for nm, s in zip(names, x)},
                                metadata={"sample_rate_hz": str(FS)}), pqf)
        mp = machine_toml(td / "mp.toml", "parquet", names[1:], names[0])
        report("Parquet import:", *interleaved(
            lambda: our_import_rate(pqf, mp, td / "p.sqlite"), raw, a.repeats),
            "raw blob write")

        from asammdf import MDF, Signal
        mf4 = td / "r.mf4"
        mdf = MDF(version="4.10")
        tt = np.arange(n) / FS
        half = N_CH // 2  # two channel groups, each with its own time channel
        for part in (range(half), range(half, N_CH)):
            mdf.append([Signal(samples=x[i], timestamps=tt, name=names[i]) for i in part])
        mdf.save(mf4, overwrite=True)
        mdf.close()
        mm = machine_toml(td / "mm.toml", "mdf", names[1:], names[0])
        report("MDF4 import (2 groups):", *interleaved(
            lambda: our_import_rate(mf4, mm, td / "m.sqlite"), raw, a.repeats),
            "raw blob write")

        import pandas as pd
        csv = td / "r.csv"
        pd.DataFrame({nm: s for nm, s in zip(names, x)}).to_csv(csv, index=False,
                                                                float_format="%.7g")

        def pandas_rate(path: Path, cols: int, chunksize: int | None = None):
            t0, c0 = time.perf_counter(), time.process_time()
            if chunksize is None:  # the whole file at once
                pd.read_csv(path, dtype=np.float64, engine="c")
            else:  # in pieces, as a reader that holds a piece at a time must
                with pd.read_csv(path, dtype=np.float64, engine="c", chunksize=chunksize) as r:
                    for _ in r:
                        pass
            return (n * cols / (time.perf_counter() - t0), n * cols / (time.process_time() - c0))

        m = machine_toml(td / "mc.toml", "csv", names[1:], names[0], f"sample_rate_hz = {FS}")
        report("CSV import:", *interleaved(
            lambda: our_import_rate(csv, m, td / "c.sqlite"), lambda: pandas_rate(csv, N_CH),
            a.repeats), "pandas read_csv")
        csvt = td / "rt.csv"
        pd.DataFrame({"time_s": tt, **{nm: s for nm, s in zip(names, x)}}).to_csv(
            csvt, index=False, float_format="%.7g")
        mt = machine_toml(td / "mct.toml", "csv", names[1:], names[0])
        # values parsed per second, the time column included on both sides
        report("CSV import, time column:", *interleaved(
            lambda: [r * (N_CH + 1) / N_CH for r in our_import_rate(csvt, mt, td / "ct.sqlite")],
            lambda: pandas_rate(csvt, N_CH + 1), a.repeats), "pandas read_csv")
        # pandas 3 converts a whole file's columns on several threads (its CPU time is
        # then above its wall time); read in pieces, as a bounded-memory reader must, it
        # runs on one: the same file parsed that way, for reference
        report("CSV vs pandas in pieces:", *interleaved(
            lambda: our_import_rate(csv, m, td / "c.sqlite"),
            lambda: pandas_rate(csv, N_CH, chunksize=65536), a.repeats),
            "pandas in 65 536-row pieces")

        if a.wide:
            sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
            from tests.ingest.test_csv_memory import MACHINE as WIDE_MACHINE, write_wide_csv
            wide = td / "wide.csv"
            write_wide_csv(wide, rows=100_000)
            mw = td / "mwide.toml"
            mw.write_text(WIDE_MACHINE)
            dt, peak = child_import_peak_mb(wide, mw, td / "wide.sqlite")
            print(f"1000-column CSV ({wide.stat().st_size / 1e6:.0f} MB, 4 columns used): "
                  f"{dt:.0f} s, peak RSS {peak} MB (target < 300 MB)")

        if a.big:
            big = td / "big.csv"
            block = csv.read_text().split("\n", 1)[1]
            with open(big, "w") as fh:
                fh.write(",".join(names) + "\n")
                while fh.tell() < 2_000_000_000:
                    fh.write(block)
            size = big.stat().st_size
            dt, rss_mb = child_import_peak_mb(big, td / "mc.toml", td / "big.sqlite")
            print(f"2 GB CSV ({size / 1e9:.2f} GB) import: {dt:.0f} s, peak RSS {rss_mb:.0f} MB "
                  f"(target < 500 MB)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
