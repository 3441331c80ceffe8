"""Dashboard speed: each review callback's server time and the run review page drawn in
headless Chromium, on a synthesised 10-minute, 16-channel processed run; the compare page
of that run and five shorter ones of the same machine, drawn in Chromium on its first load
(the bootstrap of the probe shown computed) and again (cached across page loads), and the
compare page's callbacks with the comparison cached.

Plain script (not a test): ``python benchmarks/bench_dashboard.py [--minutes 10]
[--channels 16] [--fs 2048] [--compare-runs 6] [--compare-minutes 3]``. Targets (not
asserted): review page < 2 s, callback < 200 ms, compare page of 6 runs < 3 s.
The data are invented: a smooth run-up through one lightly damped mode.
"""

from __future__ import annotations

import argparse
import shutil
import socket
import sys
import tempfile
import threading
import time
from pathlib import Path

import numpy as np
from scipy.io import wavfile

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from rundash.dashboard import ids  # noqa: E402
from rundash.dashboard.pages import review  # noqa: E402
from rundash.storage.engine import open_database  # noqa: E402
from tests import synth  # noqa: E402


def machine_toml(n_probes: int) -> str:
    head = """[machine]
name = "Bench rig B-16"
kind = "compressor"
rated_speed_rpm = 5000
min_operating_speed_rpm = 4200
max_continuous_speed_rpm = 5250
trip_speed_rpm = 5800
profile = "api617"
rotation = "ccw"

[tach]
column = "ch1"
pulses_per_rev = 1
edge = "rising"

[data]
format = "wav"
full_scale_v = 1.0
signal_units = "engineering"
"""
    probes = []
    for i in range(n_probes):
        b, axis = f"B{i // 2 + 1}", "X" if i % 2 == 0 else "Y"
        other = f"B{i // 2 + 1}-{'Y' if axis == 'X' else 'X'}"
        probes.append(f"""
[[probes]]
name = "{b}-{axis}"
column = "ch{i + 2}"
kind = "proximity"
units = "um"
angle_deg = {45.0 if axis == 'X' else 135.0}
bearing = "{b}"
axis = "{axis}"
pair = "{other}"
""")
    return head + "".join(probes)


def build(folder: Path, minutes: float, n_probes: int, fs: float, *, name: str = "bench",
          seed: int = 7, nc_rpm: float = 3200.0, db=None):
    """One synthesised run imported and processed (into ``db`` when given)."""
    from rundash.ingest.importer import import_run
    from rundash.ingest.machine_file import parse_machine_description
    from rundash.workflows.pipeline import process_run

    dur = 60.0 * minutes
    sweep = synth.smooth_sweep(300.0, 5300.0, dur)
    t = np.arange(int(dur * fs)) / fs
    theta = sweep.theta(t)
    rpm = sweep.rpm(t)
    r = rpm / nc_rpm
    zeta = 0.06
    amp = 20.0 * r**2 / np.sqrt((1 - r**2) ** 2 + (2 * zeta * r) ** 2)  # um peak
    lag = np.degrees(np.arctan2(2 * zeta * r, 1 - r**2))
    cols = [synth.tach_waveform(theta)]
    rng = np.random.default_rng(seed)
    for i in range(n_probes):
        cols.append(synth.probe_signal(theta, amp, lag + (90.0 if i % 2 else 0.0), rng=rng,
                                       snr_db=40.0))
    data = np.vstack(cols).T.astype(np.float32)
    path = folder / f"{name}.wav"
    wavfile.write(path, int(fs), data)
    del data, cols
    text = machine_toml(n_probes)
    desc = parse_machine_description(text, "bench machine")
    db = db or open_database(str(folder / "bench.sqlite"), create=True)
    t0 = time.perf_counter()
    res = import_run(db, path, desc, description_text=text, label=name, kind="run-up")
    t1 = time.perf_counter()
    process_run(db, res.run_id)
    t2 = time.perf_counter()
    print(f"built {name}: import {t1 - t0:.1f} s, process {t2 - t1:.1f} s")
    path.unlink()
    return db, res.run_id


def _encode(out):
    """JSON as Dash sends a callback's output (plotly's encoder, as Dash uses it)."""
    from plotly.io.json import to_json_plotly

    return to_json_plotly(out if isinstance(out, (tuple, list)) else [out])


def timed(fn, *args, cache=None, repeat=5):
    """Median seconds of ``fn(*args)`` plus the JSON encoding of its output; the cache is
    cleared before each call when given (a cold read) unless ``cache`` is 'warm'."""
    _encode(fn(*args))  # warm imports
    runs = []
    for _ in range(repeat):
        if cache is not None:
            cache.clear()
        t0 = time.perf_counter()
        _encode(fn(*args))
        runs.append(time.perf_counter() - t0)
    return float(np.median(runs))


def page_times(db, pages) -> dict[str, list[float]]:
    """Seconds from navigation until each page is drawn, in headless Chromium against the
    real server: ``pages`` maps a name to (path, JavaScript condition, loads); the first
    load of a page is its cold one (the server's caches are empty)."""
    if shutil.which("chromedriver") is None:
        print("chromedriver not found: page times not measured")
        return {}
    from selenium import webdriver
    from selenium.webdriver.chrome.options import Options

    from rundash.dashboard.app import create_app

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    app = create_app(db)
    threading.Thread(target=lambda: app.run(host="127.0.0.1", port=port, debug=False),
                     daemon=True).start()
    time.sleep(1.5)
    o = Options()
    for a in ("--headless", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
              "--disable-background-networking", "--disable-component-update",
              "--disable-sync", "--no-first-run", "--disable-quic", "--window-size=1400,1000"):
        o.add_argument(a)
    if shutil.which("chromium"):
        o.binary_location = shutil.which("chromium")
    d = webdriver.Chrome(options=o)
    out: dict[str, list[float]] = {}
    try:
        d.get(f"http://127.0.0.1:{port}/")  # load the scripts once
        time.sleep(1.0)
        for name, (path, ready, loads) in pages.items():
            out[name] = []
            for _ in range(loads):
                t0 = time.perf_counter()
                d.get(f"http://127.0.0.1:{port}{path}")
                while not d.execute_script(f"return ({ready}) && !document.querySelector("
                                           "'[data-dash-is-loading=\"true\"]');"):
                    if time.perf_counter() - t0 > 60:
                        text = d.execute_script("return document.body.innerText")[:600]
                        graphs = d.execute_script(
                            "return Array.from(document.querySelectorAll('.js-plotly-plot'))"
                            ".map(g => (g.closest('[id]') || {}).id + ': ' + "
                            "(g._fullData ? g._fullData.length : 'none') + ' traces');")
                        raise TimeoutError(f"{name} not drawn in 60 s; its graphs: {graphs}; "
                                           f"the page says: {text}")
                    time.sleep(0.02)
                out[name].append(time.perf_counter() - t0)
                t1 = time.perf_counter()  # the compare page's background comparison done
                while any(t.name == "rundash-compare" for t in threading.enumerate()):
                    time.sleep(0.05)
                if time.perf_counter() - t1 > 0.1:
                    print(f"{name}: the background comparison finished "
                          f"{time.perf_counter() - t0:.1f} s after the page was asked for")
    finally:
        d.quit()
    return out


def _drawn(*graph_ids) -> str:
    """JavaScript: every graph drawn with its figure's traces (a placeholder plot has an
    SVG but no traces, so the SVG alone would count a page drawn too early)."""
    one = ("(() => {{ const gd = document.querySelector('#{g} .js-plotly-plot'); "
           "return gd !== null && gd.querySelector('.main-svg') !== null && "
           "Array.isArray(gd._fullData) && gd._fullData.length > 0; }})()")
    return " && ".join(one.format(g=g) for g in graph_ids)


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--minutes", type=float, default=10.0)
    ap.add_argument("--channels", type=int, default=16)
    ap.add_argument("--fs", type=float, default=2048.0)
    ap.add_argument("--compare-runs", type=int, default=6,
                    help="runs on the compare page (the first is the review page's run); "
                         "0 or 1: the review page only")
    ap.add_argument("--compare-minutes", type=float, default=3.0,
                    help="length of each further run on the compare page")
    a = ap.parse_args()
    with tempfile.TemporaryDirectory(prefix="rundash-bench-") as tmp:
        db, run_id = build(Path(tmp), a.minutes, a.channels, a.fs)
        probe = "B1-X"
        from rundash.dashboard.cache import ResultCache

        cache = ResultCache(db)
        rows = [
            ("Bode (1X, 2X)", review.bode_figure,
             (db, run_id, probe, [1.0, 2.0], "compensated", "metric")),
            ("Bode, imperial, wrapped phase", review.bode_figure,
             (db, run_id, probe, [1.0], "compensated", "imperial", "wrapped")),
            ("polar and direct", review.polar_direct_figures,
             (db, run_id, probe, "compensated", "metric")),
            ("speed versus time", review.speed_figure, (db, run_id, probe)),
            ("cascade", review.cascade_figure, (db, run_id, probe, "metric")),
            ("Campbell", review.campbell_figure, (db, run_id, "41.5, 96")),
            ("orbit", review.orbit_figure, (db, run_id, "B1-X|B1-Y", 4000, "run-up", "metric")),
            ("verdict panel", lambda *x: review.verdict_panel(review.load_context(*x)),
             (db, run_id)),
        ]
        print(f"run: {a.minutes:g} min, {a.channels} probe channels at {a.fs:g} Hz; "
              "server time incl. JSON encoding, median of 5")
        for name, fn, args in rows:
            cached = name != "verdict panel"

            def call(*x, fn=fn, cached=cached):
                return fn(*x, cache=cache) if cached else fn(*x)

            cold = timed(call, *args, cache=cache)
            warm = timed(call, *args)
            print(f"callback {name:<32} cold {1000 * cold:7.1f} ms ({cold / 0.2:.2f} x target)"
                  f"   cached {1000 * warm:7.1f} ms ({warm / 0.2:.2f} x the 200 ms target)")
        b = review.bode_figure(db, run_id, probe, [1.0], "compensated", "metric")
        print(f"Bode figure JSON: {len(_encode(b)) / 1e3:.0f} kB, "
              f"{sum(1 for t in b.data if t.meta == 'data')} data traces")
        runs = [run_id]
        for k in range(1, a.compare_runs):  # one machine, the critical moving a little
            runs.append(build(Path(tmp), a.compare_minutes, a.channels, a.fs, name=f"run{k}",
                              seed=7 + k, nc_rpm=3200.0 * (1 - 0.004 * k), db=db)[1])
        n = len(runs)
        pages = {
            "review": (f"/run/{run_id}", _drawn(ids.BODE, ids.POLAR, ids.DIRECT, ids.SPEED,
                                                ids.CASCADE, ids.CAMPBELL, ids.ORBIT), 3)}
        if n >= 2:
            pages["compare"] = ("/compare/" + ",".join(map(str, runs)),
                                f"document.querySelector('#{ids.COMPARE_STATUS}') && document"
                                f".querySelector('#{ids.COMPARE_STATUS}').innerText.includes("
                                f"'Compared {n} runs') && " + _drawn(ids.COMPARE_BODE,
                                                                   ids.COMPARE_POLAR)
                                + f" && document.querySelector('#{ids.COMPARE_TREND} .main-svg')"
                                " !== null", 3)  # the trend may rightly hold no trace
        got = page_times(db, pages)
        if got:
            rv = float(np.median(got["review"]))
            print(f"run review page drawn in Chromium: {rv:.2f} s median of 3 "
                  f"({rv / 2.0:.2f} x the 2 s target; loads {', '.join(f'{x:.2f}' for x in got['review'])} s)")
        if n < 2:  # --compare-runs 0 or 1: the review page only
            db.dispose()
            return 0
        from rundash.dashboard.pages import compare as cp

        def overlay(*x):
            return cp.overlay_figures(*x, cache=cache)

        cold, warm = timed(overlay, db, runs, probe, cache=cache), timed(overlay, db, runs, probe)
        print(f"callback {'compare overlay (Bode, polar)':<32} cold {1000 * cold:7.1f} ms   "
              f"cached {1000 * warm:7.1f} ms ({warm / 0.2:.2f} x the 200 ms target)")
        t0 = time.perf_counter()
        cp.comparison_of(db, runs, cache=cache)
        whole = time.perf_counter() - t0
        print(f"whole comparison of {n} runs x {a.channels} probes, {cp.N_BOOT} replicates: "
              f"{whole:.2f} s (the page computes the probe shown first, this in the background)")
        other = "B1-Y" if a.channels > 1 else probe
        for name, fn, args in [
                ("compare view, another probe", lambda *x: cp.comparison_view(
                    *x, cache=cache, probe_first=True), (db, runs, other)),
                ("compare, other probes' fold", lambda *x: cp.other_probes_table(
                    *x, cache=cache, filled=False), (db, runs, probe))]:
            warm = timed(fn, *args)
            print(f"callback {name:<32} (comparison cached) {1000 * warm:7.1f} ms "
                  f"({warm / 0.2:.2f} x the 200 ms target)")
        if got:
            cmp = got["compare"]
            print(f"compare page of {n} runs ({a.minutes:g} + {n - 1} x {a.compare_minutes:g} min)"
                  f": first load {cmp[0]:.2f} s incl. the bootstrap ({cmp[0] / 3.0:.2f} x the "
                  f"3 s target), again {min(cmp[1:]):.2f} s (cached; "
                  f"{min(cmp[1:]) / 3.0:.2f} x)")
        db.dispose()
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
