"""Figure builders, checked through ``fig.to_dict()`` without a browser."""

from __future__ import annotations

import base64

import numpy as np
import pytest
from numpy.testing import assert_allclose

from rundash import figures
from rundash.analysis.profiles import required_margin_pct
from rundash.ingest.profile_file import load_profile
from rundash.units import UM_PER_MIL

OPERATING = {"min_operating_speed_rpm": 4400.0, "max_continuous_speed_rpm": 5460.0,
             "trip_speed_rpm": 6000.0}


def sdof_unbalance(speed_rpm, fn_rpm, zeta, scale_um_pp=10.0):
    """Unbalance response of a viscously damped SDOF system: p-p amplitude and phase lag.

    |X| = r^2 / sqrt((1 - r^2)^2 + (2 zeta r)^2), lag = atan2(2 zeta r, 1 - r^2), exactly
    90 deg at r = 1 (W. T. Thomson, Theory of Vibration with Applications, 4th ed., 1993,
    sec. 3.3, rotating unbalance).
    """
    r = np.asarray(speed_rpm, float) / fn_rpm
    amp = scale_um_pp * r**2 / np.sqrt((1 - r**2) ** 2 + (2 * zeta * r) ** 2)
    lag = np.degrees(np.arctan2(2 * zeta * r, 1 - r**2))
    return amp, lag


def track(probe="P-X", order=1.0, direction="run-up", fn=3000.0, zeta=0.1, n=1500):
    rpm = np.linspace(300.0, 5500.0, n)
    if direction == "coast-down":
        rpm = rpm[::-1]
    amp, lag = sdof_unbalance(rpm, fn, zeta)
    return {"probe": probe, "order": order, "direction": direction, "speed_rpm": rpm,
            "amplitude": amp, "phase_lag_deg": lag, "direct": 1.2 * amp}


def critical(probe="P-X", speed=3000.0, direction="run-up", af=5.0, **kw):
    c = {"probe": probe, "speed_rpm": speed, "direction": direction, "peak_amplitude": 50.0,
         "n1_rpm": speed * 0.9, "n2_rpm": speed * 1.1, "af_governing": af,
         "af_method": "half-power", "margin_side": "below", "required_margin_pct": 12.143,
         "separation_margin_pct": 31.8, "margin_verdict": "pass", "confidence": "high"}
    c.update(kw)
    return c


def arr(v):
    """A figure array as numpy: plotly >= 6 encodes numpy arrays as base64 ``bdata``."""
    if isinstance(v, dict) and "bdata" in v:
        out = np.frombuffer(base64.b64decode(v["bdata"]), dtype=np.dtype(v["dtype"]))
        return out.reshape(v["shape"]) if "shape" in v and isinstance(v["shape"], (list, tuple)) \
            else (out.reshape([int(x) for x in str(v["shape"]).split(",")]) if "shape" in v
                  else out)
    return np.asarray(v)


def trace_named(fig_dict, name):
    return [t for t in fig_dict["data"] if t.get("name") == name]


class TestBode:
    def test_trace_counts_and_axis_titles(self):
        tr = [track(), track(direction="coast-down"), track(order=2.0)]
        d = figures.bode(tr, criticals=[critical()], operating=OPERATING).to_dict()
        data = [t for t in d["data"] if t.get("meta") == "data"]
        assert len(data) == 2 * len(tr)  # amplitude + phase per track
        assert len(trace_named(d, "critical speeds")) == 1
        assert len([t for t in d["data"] if t.get("meta") == "cursor"]) == 2
        assert d["layout"]["yaxis"]["title"]["text"] == "amplitude (µm pp)"
        assert d["layout"]["yaxis2"]["title"]["text"] == "phase lag (deg)"
        assert d["layout"]["xaxis2"]["title"]["text"] == "speed (rpm)"

    def test_run_directions_are_told_apart_by_dash(self):
        d = figures.bode([track(), track(direction="coast-down")]).to_dict()
        dashes = {t["name"]: t["line"]["dash"] for t in d["data"] if t.get("meta") == "data"}
        assert dashes["P-X 1X run-up"] == "solid" and dashes["P-X 1X coast-down"] == "dash"

    def test_critical_markers_at_their_speeds_only_for_shown_probes(self):
        crits = [critical(speed=3000.0), critical(speed=4100.0, direction="coast-down"),
                 critical(probe="OTHER", speed=2000.0)]
        d = figures.bode([track()], criticals=crits).to_dict()
        (m,) = trace_named(d, "critical speeds")
        assert_allclose(arr(m["x"]), [3000.0, 4100.0])
        assert list(m["marker"]["symbol"]) == ["triangle-up", "triangle-down"]
        vlines = [s for s in d["layout"]["shapes"] if s["type"] == "line" and s["x0"] == s["x1"]]
        assert {s["x0"] for s in vlines} >= {3000.0, 4100.0}

    def test_half_power_band_and_margin_zone(self):
        # required margin for AF 5 below N_min: 12.143 % (DEVELOPERS.md "Reference values":
        # derived from the API 617-style rule min(16, 17 (1 - 1/(AF - 1.5))), from memory)
        req = required_margin_pct(load_profile("api617"), 5.0, "below")
        assert_allclose(req, 12.143, atol=5e-4)
        d = figures.bode([track()], criticals=[critical(required_margin_pct=req)],
                         operating=OPERATING).to_dict()
        rects = [s for s in d["layout"]["shapes"] if s["type"] == "rect"]
        spans = {(round(s["x0"], 3), round(s["x1"], 3)) for s in rects}
        assert (2700.0, 3300.0) in spans  # half-power band n1..n2
        assert (4400.0, 5460.0) in spans  # operating range
        assert (round(4400.0 * (1 - req / 100), 3), 4400.0) in spans  # required margin zone

    def test_imperial_units_convert_through_units_module(self):
        tr = [track()]
        dm = figures.bode(tr).to_dict()
        di = figures.bode(tr, system="imperial").to_dict()
        # 1 mil = 25.4 um exactly (definition of the inch)
        assert_allclose(arr(di["data"][0]["y"]) * UM_PER_MIL, arr(dm["data"][0]["y"]),
                        rtol=1e-12)
        assert di["layout"]["yaxis"]["title"]["text"] == "amplitude (mil pp)"
        dv = figures.bode(tr, kind="velocity", system="imperial").to_dict()
        assert dv["layout"]["yaxis"]["title"]["text"] == "amplitude (in/s pk)"

    def test_cursor_marks_nearest_point(self):
        d = figures.bode([track()], cursor_rpm=3000.0).to_dict()
        cur = [t for t in d["data"] if t.get("meta") == "cursor"]
        assert abs(cur[0]["x"][0] - 3000.0) < 5200.0 / 1499  # one grid step
        # lag at the natural frequency is 90 deg (Thomson, sec. 3.3)
        assert_allclose(cur[1]["y"][0], 90.0, atol=0.5)

    def test_large_tracks_are_decimated_but_keep_the_peak(self):
        tr = track(n=50_000)
        d = figures.bode([tr], max_points=1000).to_dict()
        y = arr(d["data"][0]["y"])
        assert y.size <= 1001
        assert_allclose(y.max(), np.max(tr["amplitude"]))


class TestPolar:
    def test_critical_on_curve_at_90_deg_lag(self):
        # at the natural frequency of a SDOF system the lag is exactly 90 deg
        # (Thomson, Theory of Vibration with Applications, 4th ed., sec. 3.3)
        d = figures.polar([track(n=5201)], criticals=[critical(speed=3000.0)]).to_dict()
        (m,) = trace_named(d, "critical speeds")
        assert_allclose(arr(m["theta"])[0], 90.0, atol=0.2)
        assert d["layout"]["polar"]["angularaxis"]["direction"] == "clockwise"
        assert d["layout"]["polar"]["angularaxis"]["rotation"] == 90

    def test_speed_labels_along_curve(self):
        d = figures.polar([track()], label_step_rpm=1000.0).to_dict()
        labels = [t for t in d["data"] if t.get("meta") == "labels"][0]
        assert list(labels["text"]) == ["1000", "2000", "3000", "4000", "5000"]

    def test_cw_machine_turns_the_angle_axis(self):
        d = figures.polar([track()], rotation="cw").to_dict()
        assert d["layout"]["polar"]["angularaxis"]["direction"] == "counterclockwise"


class TestSpeedTime:
    def test_time_in_band_of_a_linear_sweep(self):
        # closed form: a sweep at R rpm/s spends W / R seconds in a band W rpm wide
        t = np.linspace(0.0, 40.0, 40_001)
        n = 300.0 + 140.0 * t
        assert_allclose(figures.time_in_band(t, n, 3000.0, 3700.0), 700.0 / 140.0, atol=2e-3)

    def test_band_shaded_and_time_written(self):
        t = np.linspace(0.0, 40.0, 4001)
        n = 300.0 + 140.0 * t
        d = figures.speed_time(t, n, criticals=[critical(n1_rpm=2800.0, n2_rpm=3220.0)],
                               operating=OPERATING).to_dict()
        rects = [(s["y0"], s["y1"]) for s in d["layout"]["shapes"] if s["type"] == "rect"]
        assert (2800.0, 3220.0) in rects and (4400.0, 5460.0) in rects
        text = " ".join(a["text"] for a in d["layout"]["annotations"])
        assert "3.0 s" in text  # 420 rpm / 140 rpm/s
        assert d["layout"]["yaxis"]["title"]["text"] == "speed (rpm)"
        assert d["layout"]["xaxis"]["title"]["text"] == "time from record start (s)"


class TestLimits:
    def test_api617_direct_limit_value(self):
        # API 617-style unfiltered limit min(25.4, 25.4 sqrt(12000/N_mc)) um p-p
        # (API 617 8th ed., mechanical running test; from memory)
        lines = figures.guidance_lines(load_profile("api617"), kind="proximity", max_continuous_speed_rpm=15000.0,
                                       speed_range_rpm=(0.0, 15000.0))
        api = [ln for ln in lines if ln.get("verdict_line")]
        assert len(api) == 1
        assert_allclose(api[0]["value"], 25.4 * np.sqrt(12000.0 / 15000.0), rtol=1e-12)
        capped = figures.guidance_lines(load_profile("api617"), kind="proximity",
                                        max_continuous_speed_rpm=5460.0,
                                        speed_range_rpm=(0.0, 5460.0))
        assert_allclose([ln["value"] for ln in capped if ln.get("verdict_line")], [25.4])

    def test_iso_shaft_zones_as_reference_curves(self):
        # ISO 7919-3 zone boundaries 4800/sqrt(n), 9000/sqrt(n), 13200/sqrt(n) um p-p:
        # 80 / 150 / 220 at 3600 rpm (ISO 7919-3:2009 Annex A, from memory)
        lines = figures.guidance_lines(load_profile("api617"), kind="proximity", max_continuous_speed_rpm=5460.0,
                                       speed_range_rpm=(0.0, 3600.0))
        zones = [ln for ln in lines if not ln.get("verdict_line")]
        assert [z["label"][:12] for z in zones] == ["ISO zone A/B", "ISO zone B/C",
                                                     "ISO zone C/D"]
        assert_allclose([arr(z["values"])[-1] for z in zones], [80.0, 150.0, 220.0])
        assert not figures.guidance_lines(load_profile("api617"), kind="velocity",
                                          max_continuous_speed_rpm=5460.0,
                                          speed_range_rpm=(0.0, 3600.0))

    def test_direct_figure_draws_limit_at_profile_value(self):
        lines = figures.guidance_lines(load_profile("api617"), kind="proximity", max_continuous_speed_rpm=15000.0,
                                       speed_range_rpm=(0.0, 5500.0))
        d = figures.direct_vs_filtered([track()], limit_lines=lines).to_dict()
        lim = [t for t in d["data"] if t.get("meta") == "limit" and
               t["name"].startswith("Unfiltered")]
        assert_allclose(arr(lim[0]["y"]), [22.718] * 2, atol=5e-4)
        names = [t["name"] for t in d["data"] if t.get("meta") == "data"]
        assert names == ["P-X run-up direct", "P-X run-up 1X"]
        assert d["layout"]["yaxis"]["title"]["text"] == "amplitude (µm pp)"
        dv = figures.direct_vs_filtered([track()], kind="velocity").to_dict()
        # one convention per axis: the velocity 1X drawn as rms (tests/figures/test_levels.py)
        assert dv["layout"]["yaxis"]["title"]["text"] == "amplitude (mm/s rms; 1X as rms)"


class TestCascade:
    def test_order_lines_and_peak_kept_by_pooling(self):
        rpm = np.linspace(500.0, 6000.0, 300)
        f = np.linspace(0.0, 500.0, 1001)
        amp = np.full((rpm.size, f.size), 0.01)
        rows = np.arange(rpm.size)
        cols = np.searchsorted(f, rpm / 60.0)  # a 1X ridge
        amp[rows, cols] = 5.0
        d = figures.cascade(rpm, f, amp, orders=(1, 2), max_rows=100, max_bins=200).to_dict()
        heat = d["data"][0]
        z = arr(heat["z"])
        assert z.shape[0] == 100 and 100 <= z.shape[1] <= 200  # pooled by whole factors
        assert_allclose(np.max(arr(heat["customdata"])), 10.0)  # p-p = 2 x peak (conventions)
        lines = [t for t in d["data"] if t.get("meta") == "order"]
        assert [t["name"] for t in lines] == ["1X line", "2X line"]
        assert_allclose(arr(lines[1]["x"])[1], 2 * arr(lines[1]["y"])[1] / 60.0)
        assert d["layout"]["xaxis"]["title"]["text"] == "frequency (Hz)"


class TestCampbell:
    def test_interference_points(self):
        d = figures.campbell(6000.0, orders=(1, 2), natural_frequencies_hz=[50.0],
                             criticals=[critical(speed=3000.0)]).to_dict()
        pts = trace_named(d, "interference points")[0]
        assert_allclose(np.sort(arr(pts["x"])), [1500.0, 3000.0])  # N = 60 f / n
        crit = trace_named(d, "critical speeds (measured, 1X)")[0]
        assert_allclose(arr(crit["y"]), [50.0])  # on the 1X line: f = N / 60
        assert d["layout"]["yaxis"]["title"]["text"] == "frequency (Hz)"


class TestOrbit:
    def test_forward_circle_from_orthogonal_probes(self):
        # X at 0 deg, Y 90 deg further in the direction of rotation, Y lagging X by 90 deg:
        # a forward circular 1X orbit of radius pp / 2 (common practice, no source)
        x = {"name": "X", "angle_deg": 0.0, "amplitude": 20.0, "phase_lag_deg": 30.0}
        y = {"name": "Y", "angle_deg": 90.0, "amplitude": 20.0, "phase_lag_deg": 120.0}
        for rotation in ("ccw", "cw"):
            d = figures.orbit(x, y, rotation=rotation).to_dict()
            u, v = arr(d["data"][0]["x"]), arr(d["data"][0]["y"])
            assert_allclose(np.hypot(u, v), 10.0, rtol=1e-12)
            assert d["layout"]["meta"] == {"whirl": rotation, "sense": "forward"}

    def test_reverse_whirl_and_mounting_angles_applied(self):
        # probes at 315 and 45 deg (45 deg either side of the reference sensor)
        x = {"name": "X", "angle_deg": 315.0, "amplitude": 20.0, "phase_lag_deg": 120.0}
        y = {"name": "Y", "angle_deg": 45.0, "amplitude": 20.0, "phase_lag_deg": 30.0}
        d = figures.orbit(x, y, rotation="ccw").to_dict()
        assert d["layout"]["meta"]["sense"] == "reverse"
        u, v = arr(d["data"][0]["x"]), arr(d["data"][0]["y"])
        # the point where X peaks lies on the X probe's axis (screen angle 90 + 315 deg)
        th = np.linspace(0, 1, 257)
        k = np.argmin(np.abs(((2 * np.pi * th - np.radians(120.0)) + np.pi) % (2 * np.pi) - np.pi))
        assert_allclose(np.degrees(np.arctan2(v[k], u[k])) % 360, (90 + 315) % 360, atol=1.5)

    def test_unfiltered_revolution_matches_filtered_for_a_pure_1x(self):
        x = {"name": "X", "angle_deg": 315.0, "amplitude": 20.0, "phase_lag_deg": 10.0}
        y = {"name": "Y", "angle_deg": 45.0, "amplitude": 16.0, "phase_lag_deg": 100.0}
        th = np.linspace(0.0, 1.0, 257)
        raw_x = 300.0 + 10.0 * np.cos(2 * np.pi * th - np.radians(10.0))  # gap offset removed
        raw_y = -50.0 + 8.0 * np.cos(2 * np.pi * th - np.radians(100.0))
        d = figures.orbit(x, y, raw_x=raw_x, raw_y=raw_y, system="imperial").to_dict()
        f, r = d["data"][0], trace_named(d, "unfiltered (one revolution)")[0]
        assert_allclose(arr(r["x"]), arr(f["x"]), atol=0.05 / UM_PER_MIL)  # mean of 257 points vs 0
        assert d["layout"]["xaxis"]["title"]["text"] == "horizontal (mil)"

    def test_parallel_probes_refused(self):
        p = {"name": "X", "angle_deg": 0.0, "amplitude": 1.0, "phase_lag_deg": 0.0}
        with pytest.raises(ValueError, match="parallel"):
            figures.orbit(p, dict(p, angle_deg=180.0))


class TestHelpers:
    def test_split_by_direction(self):
        t = np.arange(10.0)
        segs = [{"kind": "steady", "t_start_s": 0.0, "t_end_s": 3.0},
                {"kind": "run-up", "t_start_s": 3.0, "t_end_s": 9.0}]
        parts = figures.split_by_direction(t, segs, min_piece_s=2.0)  # a 3 s hold is drawn
        assert [k for k, _ in parts] == ["steady", "run-up"]
        assert_allclose(np.concatenate([i for _, i in parts]), np.arange(10))
        assert figures.split_by_direction(t, [])[0][0] == "mixed"
        # when the 6 s run-up counts as long (min_piece_s 5 s), the 3 s hold is its blip
        assert [k for k, _ in figures.split_by_direction(t, segs, min_piece_s=5.0)] == ["run-up"]
        # a short hold inside a run-up is drawn as part of it
        segs = [{"kind": "run-up", "t_start_s": 0.0, "t_end_s": 3.0},
                {"kind": "steady", "t_start_s": 3.0, "t_end_s": 4.0},
                {"kind": "run-up", "t_start_s": 4.0, "t_end_s": 7.0},
                {"kind": "coast-down", "t_start_s": 7.0, "t_end_s": 9.0}]
        assert [k for k, _ in figures.split_by_direction(t, segs)] == ["run-up", "coast-down"]

    def test_whirl_direction_of_a_circle(self):
        a = np.linspace(0, 2 * np.pi, 50, endpoint=False)
        assert figures.whirl_direction(np.cos(a), np.sin(a)) == "ccw"
        assert figures.whirl_direction(np.cos(a), -np.sin(a)) == "cw"

    def test_margin_zones_take_each_sides_largest_requirement(self):
        crits = [critical(required_margin_pct=5.667), critical(required_margin_pct=12.143),
                 critical(margin_side="above", required_margin_pct=22.143)]
        z = figures.margin_zones(crits, OPERATING)
        assert_allclose([z[0]["lo_rpm"], z[1]["hi_rpm"]],
                        [4400 * (1 - 0.12143), 5460 * 1.22143])


class TestValidFigures:
    @pytest.mark.parametrize("build", [
        lambda: figures.bode([track(), track(direction="coast-down"), track(order=2.0)],
                             criticals=[critical()], operating=OPERATING, cursor_rpm=3000.0,
                             limit_lines=[{"measure": "1X", "value": 30.0, "label": "x"}]),
        lambda: figures.bode([track()], phase="wrapped"),
        lambda: figures.polar([track()], criticals=[critical()], cursor_rpm=3000.0),
        lambda: figures.direct_vs_filtered(
            [track()], operating=OPERATING, limit_lines=figures.guidance_lines(
                load_profile("api617"), kind="proximity", max_continuous_speed_rpm=5460.0,
                speed_range_rpm=(0.0, 5500.0))),
        lambda: figures.speed_time(np.linspace(0, 40, 401), np.linspace(300, 5900, 401),
                                   criticals=[critical()], operating=OPERATING),
        lambda: figures.cascade(np.linspace(500, 6000, 50), np.linspace(0, 500, 101),
                                np.ones((50, 101))),
        lambda: figures.campbell(6000.0, natural_frequencies_hz=[50.0], operating=OPERATING,
                                 criticals=[critical()]),
    ], ids=["bode", "bode-wrapped", "polar", "direct", "speed", "cascade", "campbell"])
    def test_builders_pass_plotly_validation(self, build):
        # the builders skip plotly.py's per-property validation for speed; plotly's own
        # validator (go.Figure on the dict) is the reference that the output is valid
        import plotly.graph_objects as go

        go.Figure(build().to_dict())


class TestDecimateMinmax:
    def test_each_speed_bin_keeps_its_extremes(self):
        # reference: scipy.ndimage.maximum / minimum per label over the same bins
        from scipy import ndimage

        rng = np.random.default_rng(11)
        rpm = np.linspace(300.0, 5500.0, 60_000)
        amp, lag = sdof_unbalance(rpm, 3000.0, 0.05)
        amp = amp + rng.normal(0.0, 0.3, rpm.size)
        idx = figures.decimate_minmax(rpm, amp, lag, max_points=1200)
        assert idx.size <= 1200
        n_bins = 1200 // 6
        bins = np.clip(((rpm - rpm[0]) / (rpm[-1] - rpm[0]) * n_bins).astype(int), 0,
                       n_bins - 1)
        labels = np.arange(n_bins)
        assert_allclose(ndimage.maximum(amp[idx], bins[idx], labels),
                        ndimage.maximum(amp, bins, labels), rtol=0, atol=0)
        assert_allclose(ndimage.minimum(amp[idx], bins[idx], labels),
                        ndimage.minimum(amp, bins, labels), rtol=0, atol=0)
        assert np.argmax(amp) in idx and 0 in idx and rpm.size - 1 in idx

    def test_short_tracks_untouched_and_keep_indices_kept(self):
        assert_allclose(figures.decimate_minmax(np.arange(10.0), np.ones(10)), np.arange(10))
        rpm = np.linspace(0.0, 1.0, 10_000)
        idx = figures.decimate_minmax(rpm, rpm, max_points=100, keep=[1234])
        assert 1234 in idx and idx.size <= 101

    def test_dithering_speed_falls_back_to_index_blocks(self):
        rng = np.random.default_rng(3)
        rpm = 3000.0 + rng.normal(0.0, 50.0, 50_000)  # a hold: speed jitters across bins
        amp = rng.normal(10.0, 1.0, rpm.size)
        idx = figures.decimate_minmax(rpm, amp, max_points=1000)
        assert idx.size <= 1000
        assert np.argmax(amp) in idx and np.argmin(amp) in idx


class TestUnwrapPhase:
    def test_continuous_through_a_critical_and_equal_modulo_360(self):
        # SDOF lag rises 0 -> 180 deg through the critical (Thomson, 4th ed., sec. 3.3);
        # a probe angle of 300 deg makes the stored value wrap at 360 mid-critical
        rpm = np.linspace(300.0, 5500.0, 3000)
        amp, lag = sdof_unbalance(rpm, 3000.0, 0.05)
        stored = (lag + 300.0) % 360.0
        u = figures.unwrap_phase_deg(stored, rpm, amp)
        assert np.max(np.abs(np.diff(u))) < 30.0
        assert_allclose(u % 360.0, stored, atol=1e-9)
        assert 0.0 <= u[0] < 360.0
        # reference: numpy's unwrap on the clean sequence, shifted to start in [0, 360)
        ref = np.unwrap(stored, period=360.0)
        assert_allclose(u, ref - 360.0 * np.floor(ref[0] / 360.0), atol=1e-9)

    def test_coast_down_starts_in_range_at_its_lowest_speed(self):
        rpm = np.linspace(5500.0, 300.0, 3000)
        amp, lag = sdof_unbalance(rpm, 3000.0, 0.05)
        u = figures.unwrap_phase_deg((lag + 300.0) % 360.0, rpm, amp)
        assert 0.0 <= u[-1] < 360.0 and np.max(np.abs(np.diff(u))) < 30.0

    def test_noise_at_low_amplitude_does_not_steer_the_unwrapping(self):
        # slow roll after compensation: amplitude ~0, phase uniform noise
        rng = np.random.default_rng(5)
        rpm = np.linspace(300.0, 5500.0, 4000)
        amp, lag = sdof_unbalance(rpm, 3000.0, 0.05)
        stored = (lag + 200.0) % 360.0
        weak = rpm < 900.0
        amp = amp.copy()
        amp[weak] = 0.001
        stored[weak] = rng.uniform(0.0, 360.0, weak.sum())
        u = figures.unwrap_phase_deg(stored, rpm, amp)
        strong = ~weak
        assert np.max(np.abs(np.diff(u[strong]))) < 30.0
        assert_allclose(u % 360.0, stored, atol=1e-9)  # display only: same angles
        assert np.ptp(u[strong]) < 200.0  # the ~180 deg climb, no stray 360s


class TestManySegments:
    SEGMENTS = [  # shaped like a smooth sweep cut into pieces by a jittery segmentation
        {"kind": "steady", "t_start_s": 0.0, "t_end_s": 166.0, "rpm_start": 300.0,
         "rpm_end": 1188.0},
        {"kind": "run-up", "t_start_s": 166.0, "t_end_s": 276.0, "rpm_start": 1188.0,
         "rpm_end": 2500.0},
        {"kind": "steady", "t_start_s": 276.0, "t_end_s": 279.0, "rpm_start": 2500.0,
         "rpm_end": 2520.0},
        {"kind": "run-up", "t_start_s": 279.0, "t_end_s": 408.0, "rpm_start": 2520.0,
         "rpm_end": 4200.0},
        {"kind": "coast-down", "t_start_s": 408.0, "t_end_s": 411.0, "rpm_start": 4200.0,
         "rpm_end": 4190.0},
        {"kind": "run-up", "t_start_s": 411.0, "t_end_s": 600.0, "rpm_start": 4190.0,
         "rpm_end": 5300.0},
    ]

    def test_drawn_as_one_sweep(self):
        assert figures.drawing_segments(self.SEGMENTS) == [
            {"kind": "run-up", "t_start_s": 0.0, "t_end_s": 600.0}]

    def test_a_real_hold_and_a_real_coast_down_stay(self):
        segs = [{"kind": "run-up", "t_start_s": 0.0, "t_end_s": 100.0},
                {"kind": "steady", "t_start_s": 100.0, "t_end_s": 160.0, "rpm_start": 5400.0,
                 "rpm_end": 5410.0},
                {"kind": "coast-down", "t_start_s": 160.0, "t_end_s": 260.0}]
        assert [s["kind"] for s in figures.drawing_segments(segs)] == \
            ["run-up", "steady", "coast-down"]

    def test_one_trace_per_probe_order_direction_with_gaps(self):
        t = np.linspace(0.0, 300.0, 3001)
        rpm = np.concatenate([np.linspace(300, 5000, 1000), np.linspace(5000, 1000, 1000),
                              np.linspace(1000, 5000, 1001)])
        amp, lag = sdof_unbalance(rpm, 3000.0, 0.1)
        segs = [{"kind": "run-up", "t_start_s": 0.0, "t_end_s": t[1000]},
                {"kind": "coast-down", "t_start_s": t[1000], "t_end_s": t[2000]},
                {"kind": "run-up", "t_start_s": t[2000], "t_end_s": 300.0}]
        traces = [{"probe": "P-X", "order": 1.0, "direction": d, "speed_rpm": rpm[i],
                   "amplitude": amp[i], "phase_lag_deg": lag[i]}
                  for d, i in figures.split_by_direction(t, segs)]
        assert len(traces) == 3
        d = figures.bode(traces).to_dict()
        data = [tr for tr in d["data"] if tr.get("meta") == "data"]
        assert sorted(tr["name"] for tr in data[::2]) == ["P-X 1X coast-down", "P-X 1X run-up"]
        x = arr([tr for tr in data if tr["name"] == "P-X 1X run-up"][0]["x"])
        assert np.isnan(x).sum() == 1  # one gap between the two run-up pieces


class TestBodePhase:
    def test_unwrapped_by_default_wrapped_on_request(self):
        tr = track()
        tr["phase_lag_deg"] = (tr["phase_lag_deg"] + 300.0) % 360.0  # wraps mid-critical
        du = figures.bode([tr]).to_dict()
        dw = figures.bode([tr], phase="wrapped").to_dict()
        pu, pw = arr(du["data"][1]["y"]), arr(dw["data"][1]["y"])
        xu, xw = arr(du["data"][1]["x"]), arr(dw["data"][1]["x"])
        assert np.nanmax(np.abs(np.diff(pu))) < 30.0
        # wrapped: the jump through 360 -> 0 is a gap (a NaN point), not a vertical line
        assert np.nanmax(np.abs(np.diff(pw))) < 30.0 and np.isnan(xw).sum() == 1
        keep = np.isfinite(xw)
        assert_allclose(xw[keep], xu)
        assert_allclose(pu % 360.0, pw[keep], atol=1e-9)  # same angles, display only
        assert dw["layout"]["yaxis2"]["range"] == [0, 360]
        assert "range" not in du["layout"]["yaxis2"]
        assert any("unwrapped" in a["text"] for a in du["layout"]["annotations"])
        assert_allclose(tr["phase_lag_deg"], (track()["phase_lag_deg"] + 300.0) % 360.0)


class TestFittedModelOverData:
    """The run's fitted model (findings ``modal_model.curves``) drawn over the 1X data:
    here the model is the same closed-form SDOF response as the data (Thomson, 4th ed.,
    sec. 3.3), so the drawn curves lie on the data; its lags are given a whole turn off
    (as a stored lag may be) and must be moved back onto the data's unwrapped phase."""

    def _model(self):
        rpm = np.linspace(2000.0, 4000.0, 241)
        amp, lag = sdof_unbalance(rpm, 3000.0, 0.1)
        return [{"probe": "P-X", "speed_rpm": rpm.tolist(), "amplitude": amp.tolist(),
                 "phase_lag_deg": (lag - 360.0).tolist()}]

    def test_bode_draws_the_model_on_the_data(self):
        d = figures.bode([track(n=5201)], model=self._model()).to_dict()
        amp_t, ph_t = [t for t in d["data"] if t.get("meta") == "model"]
        rpm = arr(amp_t["x"])
        ref_amp, ref_lag = sdof_unbalance(rpm, 3000.0, 0.1)
        assert_allclose(arr(amp_t["y"]), ref_amp, rtol=1e-9)
        assert_allclose(arr(ph_t["y"]), ref_lag, atol=1e-6)
        assert amp_t["yaxis"] == "y" and ph_t["yaxis"] == "y2"

    def test_other_probes_model_not_drawn(self):
        d = figures.bode([track(probe="P-Y")], model=self._model()).to_dict()
        assert not [t for t in d["data"] if t.get("meta") == "model"]

    def test_polar_draws_the_model(self):
        d = figures.polar([track()], model=self._model()).to_dict()
        (m,) = [t for t in d["data"] if t.get("meta") == "model"]
        _, ref_lag = sdof_unbalance(arr(m["customdata"]), 3000.0, 0.1)
        assert_allclose(arr(m["theta"]), ref_lag % 360.0, atol=1e-6)


class TestBearingSplitView:
    """The split view draws what the findings say (our format, no outside source): the
    major-axis curve, each mode at its steady peak with its direction and whirl."""

    def test_two_modes_with_directions(self):
        rpm = np.linspace(2800.0, 4200.0, 241)
        a1, _ = sdof_unbalance(rpm, 3373.0, 0.055)
        a2, _ = sdof_unbalance(rpm, 3613.0, 0.055)
        entry = {"bearing": "A", "probes": ["A-X", "A-Y"], "split": "two modes",
                 "major_curve": {"speed_rpm": rpm.tolist(), "major_amplitude": np.maximum(a1, a2).tolist()},
                 "modes": [{"natural_frequency_rpm": 3373.0, "peak_speed_rpm": 3383.3,
                            "direction_deg": 1.0, "whirl": "planar"},
                           {"natural_frequency_rpm": 3613.0, "peak_speed_rpm": 3624.0,
                            "direction_deg": 89.0, "whirl": "planar"}],
                 "criticals": [{"speed_rpm": 3383.0, "af": 8.9}, {"speed_rpm": 3624.0, "af": 9.0}]}
        d = figures.bearing_modes(entry).to_dict()
        (curve,) = [t for t in d["data"] if t.get("meta") == "model"]
        assert_allclose(arr(curve["y"]), np.maximum(a1, a2))
        xs = sorted(sh["x0"] for sh in d["layout"]["shapes"])
        assert xs == [3383.3, 3624.0]
        texts = " ".join(a["text"] for a in d["layout"]["annotations"])
        assert "along 1°, planar" in texts and "along 89°, planar" in texts
        assert d["layout"]["meta"]["split"] == "two modes"
        assert "two modes" in d["layout"]["title"]["text"]
