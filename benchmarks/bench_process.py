"""`rundash process` of a 10-minute, 16-channel, 25.6 kHz run (about 246 M samples).

Targets: >= 40 M channel-samples/s end to end (<= 6 s for 10 minutes), and a peak RSS
that does not grow with the run's samples: a 2-hour run (``--minutes 120``) under
1.5 GB. The run is synthesised (a 300 -> 12 000 rpm sweep, a tach channel and 15 probe
channels with a 1X resonance, 2X and noise), written as a 16-bit WAV in blocks, imported
with `rundash import`, then processed with `rundash process --timings` in a child
process whose wall time and peak RSS are measured; the child prints the seconds per
stage (read, tach, speed, tracking, cascade, findings, modal fits, save), printed here
with each stage's share of the wall time. "startup" is the child's wall time outside
``process_run`` (interpreter start, imports, opening the database).

Runs longer than about 80 minutes are written as HDF5 (float32, the same samples the
WAV reader gives), since a WAV file holds at most 4 GB.

Several run lengths (``--minutes 10 30 120``) are processed one after the other and
summed up in one table: the peak RSS of each, and how much it grew per minute of run
from the length before (the growth that a longer run would add).

The machine's own speed changes when other jobs share it: ``--repeat N`` processes each
run N times and prints the median run (with its stages), the fastest and the slowest;
before each processing a fixed piece of numpy work is timed ("machine check"), so a slow
repeat shows beside a slow check.

Usage: python benchmarks/bench_process.py [--minutes 10 [30 ...]] [--keep DIR] [--reuse]
[--repeat N]
(``--reuse`` with ``--keep``: process the run already imported in DIR again; with several
lengths each has its own folder ``DIR/<M>min``.)
"""

from __future__ import annotations

import argparse
import os
import shutil
import struct
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

FS = 25600
N_CH = 16
FULL_SCALE_V = 10.0


def _pcm_blocks(n: int):
    """The run as 16-bit PCM blocks (samples x channels), 2^18 samples at a time."""
    rpm0, rpm1 = 300.0, 12000.0
    dur = n / FS
    rate = (rpm1 - rpm0) / dur
    rng = np.random.default_rng(0)
    block = 1 << 18
    for s in range(0, n, block):
        t = (s + np.arange(min(block, n - s))) / FS
        rpm = rpm0 + rate * t
        theta = (rpm0 * t + 0.5 * rate * t * t) / 60.0
        r = rpm / 3000.0
        h = r * r / ((1 - r * r) + 2j * 0.05 * r)
        x = np.empty((t.size, N_CH), np.float32)
        ph = np.mod(theta, 1.0)
        x[:, 0] = np.where(ph < 0.1, 0.5, 4.5)  # tach: a notch, 10 % of a turn
        for c in range(1, N_CH):
            x[:, c] = (0.2 * np.real(h * np.exp(1j * (2 * np.pi * theta + 0.3 * c)))
                       + 0.02 * np.cos(4 * np.pi * theta)
                       + 0.005 * rng.standard_normal(t.size))
        yield s, np.round(x / FULL_SCALE_V * 32767).astype("<i2")


def write_wav(path: Path, minutes: float) -> int:
    n = int(minutes * 60 * FS)
    data_bytes = n * N_CH * 2
    with open(path, "wb") as fh:
        fh.write(b"RIFF" + struct.pack("<I", 36 + data_bytes) + b"WAVE")
        fh.write(b"fmt " + struct.pack("<IHHIIHH", 16, 1, N_CH, FS, FS * N_CH * 2, N_CH * 2, 16))
        fh.write(b"data" + struct.pack("<I", data_bytes))
        for _, pcm in _pcm_blocks(n):
            fh.write(pcm.tobytes())
    return n


def write_hdf5(path: Path, minutes: float) -> int:
    """The same samples as :func:`write_wav` (the WAV reader's float32 volts), as one
    float32 dataset per channel: for runs whose WAV would pass the format's 4 GB limit."""
    import h5py

    n = int(minutes * 60 * FS)
    scale = np.float32(FULL_SCALE_V / 32768.0)
    with h5py.File(path, "w") as f:
        f.attrs["sample_rate_hz"] = float(FS)
        ds = [f.create_dataset(f"ch{c + 1}", (n,), dtype="<f4", chunks=(1 << 16,))
              for c in range(N_CH)]
        for s, pcm in _pcm_blocks(n):
            x = pcm.astype(np.float32) * scale
            for c in range(N_CH):
                ds[c][s:s + x.shape[0]] = x[:, c]
    return n


def machine(path: Path) -> Path:
    probes = "\n".join(f'[[probes]]\nname = "P{c}"\ncolumn = "ch{c + 1}"\nkind = "proximity"\n'
                       f'units = "um"\nsensitivity_mv_per_unit = 7.874\n' for c in range(1, N_CH))
    path.write_text(f"""
[machine]
name = "Bench train"
kind = "compressor"
rated_speed_rpm = 11000
min_operating_speed_rpm = 9000
max_continuous_speed_rpm = 11500

[tach]
column = "ch1"
edge = "falling"

{probes}
[data]
full_scale_v = {FULL_SCALE_V}
""")
    return path


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--minutes", type=float, nargs="+", default=[10.0],
                    help="run length(s) in minutes (several: one after the other)")
    ap.add_argument("--keep", help="folder to keep the files in (default: a temp folder)")
    ap.add_argument("--reuse", action="store_true",
                    help="with --keep: process the run already imported there again")
    ap.add_argument("--repeat", type=int, default=1,
                    help="process each run this many times (fresh processes) and print the "
                         "median, fastest and slowest")
    a = ap.parse_args()
    rows = []
    for minutes in a.minutes:
        if len(a.minutes) > 1:
            print(f"--- {minutes:g}-minute run")
        td = None
        if a.keep:
            td = Path(a.keep) / f"{minutes:g}min" if len(a.minutes) > 1 else Path(a.keep)
        peak = bench(minutes, td, a.reuse, max(a.repeat, 1))
        if peak is None:
            return 1
        rows.append((minutes, peak))
    if len(rows) > 1:
        print(f"peak RSS by run length ({N_CH} channels, {FS} Hz; target < 1536 MB at 120 min):")
        for j, (minutes, peak) in enumerate(rows):
            grow = ""
            if j:
                m0, p0 = rows[j - 1]
                grow = f"  {(peak - p0) / (minutes - m0):+.2f} MB per minute of run from {m0:g} min"
            print(f"  {minutes:6g} min  {peak:6.0f} MB{grow}")
    return 0


def machine_check() -> float:
    """Seconds of a fixed piece of numpy work (sums, a sort and an FFT of 4 M float32
    samples; best of three): measured before each processing, so that a slow repeat on a
    machine shared with other jobs shows as a slow check beside it."""
    x = np.random.default_rng(1).standard_normal(1 << 22).astype(np.float32)
    best = float("inf")
    for _ in range(3):
        t0 = time.perf_counter()
        np.sum(x * x)
        np.sort(x)
        np.fft.rfft(x)
        best = min(best, time.perf_counter() - t0)
    return best


def _child_env() -> dict[str, str]:
    """The environment of the processing child: Python may keep the compiled modules (an
    installed program has them; ``PYTHONDONTWRITEBYTECODE`` in the caller's environment
    would make every start-up compile rundash again, about 0.3-2 s)."""
    env = dict(os.environ)
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    return env


def warm_up() -> None:
    """Import the processing chain once in a child with bytecode caching on, before the
    clock: the timed start-ups then load compiled modules, as an installed program does."""
    subprocess.run([sys.executable, "-c", "import rundash.cli.commands, "
                    "rundash.workflows.pipeline, rundash.workflows.review"],
                   check=True, env=_child_env())


def process_once(db: Path, run_id: str, echo: bool = False):
    """``rundash process --timings`` of the run in a child process: (wall s, the wall of
    process_run, {stage: (wall s, CPU s)}, the child's rusage, its peak RSS in MB, the
    load average before and after); None when it failed."""
    load0 = os.getloadavg()[0]
    t0 = time.perf_counter()
    proc = subprocess.Popen([sys.executable, "-m", "rundash.cli", "process", run_id, "--db",
                             str(db), "--quiet", "--timings"], stdout=subprocess.PIPE, text=True,
                            env=_child_env())
    _, status, usage = os.wait4(proc.pid, 0)  # this child's own peak RSS
    wall = time.perf_counter() - t0
    out = proc.stdout.read().strip()
    if status != 0:
        print(out)
        print("rundash process failed")
        return None
    stages, inner = {}, None
    for line in out.splitlines():
        if line.startswith("stage times"):
            inner = float(line.rsplit("wall", 1)[1].split()[0])
        elif line.startswith("  ") and inner is not None:
            name, sec, cpu = line.rsplit(None, 2)
            stages[name.strip()] = (float(sec), float(cpu))
        elif echo:
            print(line)
    return wall, inner, stages, usage, usage.ru_maxrss / 1024, load0, os.getloadavg()[0]


def bench(minutes: float, keep: Path | None, reuse: bool, repeat: int = 1) -> float | None:
    """One run length: synthesise, import, process; the peak RSS in MB (None: failed)."""
    td = keep or Path(tempfile.mkdtemp())
    td.mkdir(parents=True, exist_ok=True)
    big = minutes * 60 * FS * N_CH * 2 > 4.0e9  # a WAV holds at most 4 GB of data
    wav, db = td / ("long.h5" if big else "long.wav"), td / "bench.sqlite"
    if reuse and db.exists():
        run_id = "1"
        n = int(round(minutes * 60 * FS))
    else:
        t0 = time.perf_counter()
        n = (write_hdf5 if big else write_wav)(wav, minutes)
        print(f"synthesised {N_CH} x {n} samples ({N_CH * n / 1e6:.0f} M) in "
              f"{time.perf_counter() - t0:.0f} s")
        m = machine(td / "m.toml")
        t0 = time.perf_counter()
        run_id = subprocess.run([sys.executable, "-m", "rundash.cli", "import", str(wav),
                                 "--machine", str(m), "--db", str(db), "--quiet", "--force"],
                                check=True, capture_output=True, text=True).stdout.strip()
        print(f"import: {time.perf_counter() - t0:.1f} s")
        if keep is None:
            wav.unlink()
    warm_up()
    runs = []
    for k in range(repeat):
        check = machine_check()
        one = process_once(db, run_id, echo=k == 0)
        if one is None:
            return None
        runs.append((check, one))
        if repeat > 1:
            wall, _, _, _, peak_k, load0, load1 = one
            print(f"  repeat {k + 1}: {wall:.2f} s wall, {N_CH * n / wall / 1e6:.1f} M "
                  f"channel-samples/s, peak RSS {peak_k:.0f} MB, load average {load0:.1f} -> "
                  f"{load1:.1f}; machine check {check * 1e3:.1f} ms")
    best_check = min(c for c, _ in runs)
    # the median run by wall time (the lower middle one of an even number)
    check, (wall, inner, stages, usage, peak, load0, load1) = \
        sorted(runs, key=lambda r: r[1][0])[(len(runs) - 1) // 2]
    rate = N_CH * n / wall / 1e6
    what = f"median of {repeat} runs" if repeat > 1 else "one run"
    print(f"rundash process ({what}): {wall:.2f} s wall, {rate:.1f} M channel-samples/s "
          f"({rate / 40.0:.2f} x the 40 M/s target); load average {load0:.1f} -> "
          f"{load1:.1f} on {os.cpu_count()} cores; CPU {usage.ru_utime:.1f} s user "
          f"+ {usage.ru_stime:.1f} s system; machine check {check * 1e3:.1f} ms "
          f"({check / best_check:.2f} x the fastest check of this benchmark)")
    if repeat > 1:
        walls = sorted(w for _, (w, *_rest) in runs)
        print(f"  wall over the {repeat} runs: fastest {walls[0]:.2f} s "
              f"({N_CH * n / walls[0] / 1e6:.1f} M/s), slowest {walls[-1]:.2f} s "
              f"({N_CH * n / walls[-1] / 1e6:.1f} M/s)")
    if inner is not None:
        print(f"  {'stage':<12} {'wall s':>7} {'share':>6}  {'CPU s':>6}")
        print(f"  {'startup':<12} {wall - inner:7.2f} {100 * (wall - inner) / wall:5.1f} %")
        for name, (sec, cpu) in stages.items():
            print(f"  {name:<12} {sec:7.2f} {100 * sec / wall:5.1f} %  {cpu:6.2f}"
                  + {"read": "  (in the reader thread, beside tracking)",
                     "save": "  (in the writer thread, beside findings and modal fits)"
                     }.get(name, ""))
    peak = max(one[4] for _, one in runs)
    print(f"peak RSS of the processing child: {peak:.0f} MB for a {minutes:g}-minute run "
          f"(target < 1536 MB at 120 minutes; {peak * 1024 * 1024 / (N_CH * n * 4):.3f} x "
          f"the run's float32 samples)")
    if keep is None:
        shutil.rmtree(td, ignore_errors=True)
    return peak


if __name__ == "__main__":
    sys.exit(main())
