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
    con = sqlite3.connect(db, isolation_level=None)
    con.execute("PRAGMA journal_mode=WAL")
    con.execute("PRAGMA synchronous=NORMAL")
    con.execute("CREATE TABLE c (id INTEGER PRIMARY KEY, ch INT, k INT, s INT, n INT, "
                "fs REAL, data BLOB, UNIQUE (ch, k))")
    t0 = time.perf_counter()
    con.execute("BEGIN IMMEDIATE")
    for k, s in enumerate(range(0, x.shape[1], CHUNK)):
        blk = x[:, s:s + CHUNK].astype("<f4")
        con.executemany("INSERT INTO c (ch, k, s, n, fs, data) VALUES (?,?,?,?,?,?)",
                        [(i, k, s, blk.shape[1], FS, blk[i].tobytes()) for i in range(N_CH)])
    con.execute("COMMIT")
    dt = time.perf_counter() - t0
    con.close()
    return x.size / dt


def our_import_rate(data: Path, machine: Path, db: Path) -> float:
    """Samples/s of import_run alone (the database is created before the clock starts)."""
    from rundash.ingest.importer import import_run
    from rundash.ingest.machine_file import load_machine_description
    from rundash.storage.engine import open_database
    desc, text = load_machine_description(machine)
    d = open_database(str(db), create=True)
    warm = open_database(str(db) + ".warm", create=True)
    import_run(warm, data, desc)  # one-off module imports and a warm page cache, untimed
    warm.dispose()
    t0 = time.perf_counter()
    res = import_run(d, data, desc)
    dt = time.perf_counter() - t0
    d.dispose()
    return res.n_samples * res.n_channels / dt


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
        base = raw_blob_write_rate(x, td / "raw.sqlite")
        print(f"record: {N_CH} channels x {n} samples ({x.nbytes / 1e6:.0f} MB float32)")
        print(f"raw SQLite blob write:      {base / 1e6:8.1f} M samples/s")

        from scipy.io import wavfile
        wav = td / "r.wav"
        wavfile.write(wav, int(FS), x.T.copy())
        m = machine_toml(td / "mw.toml", "wav", [f"ch{i + 2}" for i in range(N_CH - 1)], "ch1")
        r = our_import_rate(wav, m, td / "w.sqlite")
        print(f"WAV import (float32):       {r / 1e6:8.1f} M samples/s  ratio {r / base:5.2f} (target >= 0.5)")

        import h5py
        h5 = td / "r.h5"
        with h5py.File(h5, "w") as f:
            f.attrs["sample_rate_hz"] = FS
            for nm, s in zip(names, x):
                f.create_dataset(nm, data=s)
        m = machine_toml(td / "mh.toml", "hdf5", names[1:], names[0])
        r = our_import_rate(h5, m, td / "h.sqlite")
        print(f"HDF5 import:                {r / 1e6:8.1f} M samples/s  ratio {r / base:5.2f} (target >= 0.5)")

        import pyarrow as pa
        import pyarrow.parquet as pq
        pqf = td / "r.parquet"
        pq.write_table(pa.table({nm: s for nm, s in zip(names, x)},
                                metadata={"sample_rate_hz": str(FS)}), pqf)
        m = machine_toml(td / "mp.toml", "parquet", names[1:], names[0])
        r = our_import_rate(pqf, m, td / "p.sqlite")
        print(f"Parquet import:             {r / 1e6:8.1f} M samples/s  ratio {r / base:5.2f} (target >= 0.5)")

        from asammdf import MDF, Signal
        mf4 = td / "r.mf4"
        mdf = MDF(version="4.10")
        tt = np.arange(n) / FS
        half = N_CH // 2  # two channel groups, each with its own time channel
        for part in (range(half), range(half, N_CH)):
            mdf.append([Signal(samples=x[i], timestamps=tt, name=names[i]) for i in part])
        mdf.save(mf4, overwrite=True)
        mdf.close()
        m = machine_toml(td / "mm.toml", "mdf", names[1:], names[0])
        r = our_import_rate(mf4, m, td / "m.sqlite")
        print(f"MDF4 import (2 groups):     {r / 1e6:8.1f} M samples/s  ratio {r / base:5.2f} (target >= 0.5)")

        import pandas as pd
        csv = td / "r.csv"
        k = n
        pd.DataFrame({nm: s[:k] for nm, s in zip(names, x)}).to_csv(csv, index=False,
                                                                     float_format="%.7g")
        t0 = time.perf_counter()
        pd.read_csv(csv, dtype=np.float64, engine="c")
        pandas_rate = k * N_CH / (time.perf_counter() - t0)
        m = machine_toml(td / "mc.toml", "csv", names[1:], names[0],
                         f"sample_rate_hz = {FS}")
        r = our_import_rate(csv, m, td / "c.sqlite")
        print(f"pandas read_csv parse:      {pandas_rate / 1e6:8.1f} M samples/s")
        print(f"CSV import:                 {r / 1e6:8.1f} M samples/s  ratio {r / pandas_rate:5.2f} (target >= 0.5)")
        csvt = td / "rt.csv"
        pd.DataFrame({"time_s": tt, **{nm: s for nm, s in zip(names, x)}}).to_csv(
            csvt, index=False, float_format="%.7g")
        t0 = time.perf_counter()
        pd.read_csv(csvt, dtype=np.float64, engine="c")
        pandas_t = (N_CH + 1) * n / (time.perf_counter() - t0)
        m = machine_toml(td / "mct.toml", "csv", names[1:], names[0])
        r = our_import_rate(csvt, m, td / "ct.sqlite") * (N_CH + 1) / N_CH
        print(f"pandas read_csv, time col:  {pandas_t / 1e6:8.1f} M values/s")
        print(f"CSV import, time column:    {r / 1e6:8.1f} M values/s   ratio {r / pandas_t:5.2f} (target >= 0.5)")

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
