"""Recorder with incremental processing: throughput (x real time) and latency.

16 channels (a tach and 15 proximity probes) at 25.6 kHz, a 20 s run-up 1200 -> 9000 rpm
of our own invention, held in memory and handed to the recorder by a driver source:

1. unpaced: recorder alone (chunks to SQLite) and recorder + live processing
   (tach, vectors, warnings, live tables); the figure is record seconds per wall second;
2. paced at 10 x and at 1 x real time (the first 6 s, slow revolutions): from the last
   sample of a revolution arriving to its vector being committed to the database
   (median, 95th percentile and max over the updates). A page polling every second adds
   up to one second to the figure on screen.

Run: python benchmarks/bench_recorder.py   (prints figures; asserts nothing)
"""

from __future__ import annotations

import bisect
import tempfile
import time
from pathlib import Path

import numpy as np

from rundash.ingest.machine_file import parse_machine_description
from rundash.ingest.recorder import record
from rundash.ingest.sources import Source, StreamHeader
from rundash.workflows.live import LiveParams, record_live
from rundash.storage.engine import open_database

FS = 25600.0
N_PROBES = 15
DUR_S = 20.0


def machine_text() -> str:
    probes = "".join(f"""
[[probes]]
name = "P{i:02d}"
column = "p{i:02d}"
kind = "proximity"
units = "um"
sensitivity_mv_per_unit = 7.874
""" for i in range(N_PROBES))
    return f"""
[machine]
name = "Bench rig B-16"
kind = "compressor"
rated_speed_rpm = 8500
min_operating_speed_rpm = 7600
max_continuous_speed_rpm = 8900
profile = "api617"

[tach]
column = "tach"
{probes}"""


def make_data():
    t = np.arange(int(DUR_S * FS)) / FS
    rpm0, rate = 1200.0, (9000.0 - 1200.0) / DUR_S
    theta = (rpm0 * t + 0.5 * rate * t * t) / 60.0
    phi = np.mod(theta + 0.5, 1.0) - 0.5
    tach = np.clip(0.5 + phi / 0.02, 0, 1) * 5.0 * (phi < 0.3)
    x = np.empty((N_PROBES + 1, t.size), np.float32)
    x[0] = tach
    rng = np.random.default_rng(0)
    for i in range(N_PROBES):
        x[i + 1] = 0.2 * np.cos(2 * np.pi * theta - 0.3 * i) + 0.002 * rng.standard_normal(t.size)
    return x


class MemorySource(Source):
    name = "bench memory source"

    def __init__(self, x, speed=0.0, block_s=0.05):
        self.x, self.speed, self.block = x, speed, int(block_s * FS)
        self.arrivals: list[tuple[int, float]] = []  # (end sample index, wall time)

    def open(self):
        return StreamHeader(channels=("tach",) + tuple(f"p{i:02d}" for i in range(N_PROBES)),
                            sample_rate_hz=FS)

    def blocks(self):
        t0 = time.monotonic()
        for a in range(0, self.x.shape[1], self.block):
            b = self.x[:, a:a + self.block]
            if self.speed:
                wait = t0 + (a + b.shape[1]) / FS / self.speed - time.monotonic()
                if wait > 0:
                    time.sleep(wait)
            self.arrivals.append((a + b.shape[1], time.monotonic()))
            yield b


def main() -> None:
    text = machine_text()
    desc = parse_machine_description(text, "bench machine")
    x = make_data()
    n_ch_samples = x.size
    print(f"{x.shape[0]} channels x {FS:g} Hz, {DUR_S:g} s record "
          f"({n_ch_samples / 1e6:.1f} M channel-samples)")
    with tempfile.TemporaryDirectory() as tmp:
        db = open_database(str(Path(tmp) / "bench.sqlite"), create=True)
        t0 = time.perf_counter()
        record(db, desc, MemorySource(x), description_text=text)
        t_rec = time.perf_counter() - t0
        params = LiveParams(process_at_end=False)
        t0 = time.perf_counter()
        res = record_live(db, desc, MemorySource(x), description_text=text, params=params)
        t_live = time.perf_counter() - t0
        print(f"recorder alone (chunks to SQLite):        {DUR_S / t_rec:6.1f} x real time "
              f"({n_ch_samples / t_rec / 1e6:6.1f} M channel-samples/s)")
        print(f"recorder + live processing and tables:    {DUR_S / t_live:6.1f} x real time "
              f"({n_ch_samples / t_live / 1e6:6.1f} M channel-samples/s); {res.n_blocks} "
              "revolutions tracked")
        print(f"ratio live / recorder alone:              {t_rec / t_live:6.2f}")

        for speed, n in ((10.0, x.shape[1]), (1.0, int(6 * FS))):
            src = MemorySource(x[:, :n], speed=speed)
            lat: list[float] = []

            def on_update(run_id, upd, src=src, lat=lat):
                if not upd.track.n_blocks:
                    return
                now = time.monotonic()
                # the last sample of the newest revolution (block centre + half a rev)
                t_end = upd.track.time_s[-1] + 0.5 * 60.0 / upd.track.speed_rpm[-1]
                ends = [e for e, _ in src.arrivals]
                k = bisect.bisect_left(ends, int(np.ceil(t_end * FS)))
                if k < len(src.arrivals):
                    lat.append(now - src.arrivals[k][1])

            t0 = time.perf_counter()
            record_live(db, desc, src, description_text=text, params=params,
                        on_update=on_update)
            wall = time.perf_counter() - t0
            la = np.array(lat)
            print(f"paced at {speed:g} x real time ({n / FS:.0f} s record, {wall:.1f} s wall): "
                  f"sample arrival -> its vector committed: median {np.median(la):.3f} s, "
                  f"95 % {np.percentile(la, 95):.3f} s, max {la.max():.3f} s "
                  f"({la.size} updates)")
        db.dispose()


if __name__ == "__main__":
    main()
