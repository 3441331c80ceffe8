"""Cost of rundash.dsp.vold_kalman against record length (plain script, not a test).

Times the filter on N and 10 N samples of an invented two-order run-up (two orders
tracked jointly, bandwidth in orders, automatic decimation) and prints the ratio; the
banded Cholesky solve is linear in length, so the target is a ratio <= 11.

Run from the repository root: ``python benchmarks/bench_vold_kalman.py [N]``.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from rundash.dsp import vold_kalman  # noqa: E402

FS = 10240.0


def record(n: int):
    t = np.arange(n) / FS
    duration = n / FS
    rpm = 600.0 + 5400.0 * t / duration  # 600 -> 6000 rpm over the record
    theta = np.cumsum(rpm / 60.0) / FS
    rng = np.random.default_rng(0)
    x = (np.cos(2 * np.pi * theta) + 0.4 * np.cos(2 * np.pi * 2 * theta - 1.0)
         + 0.05 * rng.standard_normal(n))
    return x, rpm


def timed(n: int, repeats: int = 3) -> float:
    x, rpm = record(n)
    best = np.inf
    for _ in range(repeats):
        t0 = time.perf_counter()
        res = vold_kalman(x, FS, rpm, [1.0, 2.0], bandwidth_orders=0.05)
        best = min(best, time.perf_counter() - t0)
    print(f"N = {n:>9d} samples ({n / FS:6.1f} s, decimate {res.decimate}, "
          f"{res.time_s.size} solved samples): {best * 1e3:8.1f} ms")
    return best


def main(n: int = 500_000) -> None:
    t1 = timed(n)
    t10 = timed(10 * n)
    print(f"ratio time(10 N) / time(N): {t10 / t1:.2f}  (target <= 11)")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 500_000)
