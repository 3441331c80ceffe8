"""Tests of rundash.dsp.speed (speed profile and segmentation).

Reference: closed-form angle and speed of the synthetic sweeps (tests/synth.py). A
not-a-knot cubic spline reproduces a cubic exactly (spline interpolation theory, e.g.
C. de Boor, A Practical Guide to Splines, rev. ed., Springer 2001, ch. 4; from memory),
so a constant-acceleration sweep (angle quadratic in time) is recovered to rounding.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from rundash.dsp import Segment, run_kind, segment, speed_profile
from rundash.errors import DspError, TachError
from tests import synth

SWEEPS = {
    "up-300-500rpm_s": synth.linear_sweep(300.0, 500.0, 23.4),
    "up-300-50rpm_s": synth.linear_sweep(300.0, 50.0, 20.0),
    "down-12000-500rpm_s": synth.linear_sweep(12000.0, -500.0, 23.0),
    "s-curve-300-6000": synth.smooth_sweep(300.0, 6000.0, 20.0),
    "exp-coast-12000": synth.exp_coast_down(12000.0, 30.0, 40.0),
}


@pytest.mark.parametrize("name", list(SWEEPS))
def test_speed_error_below_requirement(name):
    # Requirement: speed error <= 0.05 % of rpm on sweeps of 50-500 rpm/s, 300-12000 rpm.
    sweep = SWEEPS[name]
    prof = speed_profile(sweep.rev_times())
    assert prof.model == "cubic"
    tg = np.linspace(prof.t_start, prof.t_end, 20001)
    err = np.abs(prof.rpm(tg) / sweep.rpm(tg) - 1.0)
    assert np.max(err) < 5e-4
    assert np.max(np.abs(prof.angle_rev(tg) - sweep.theta(tg))) < 1e-4


def test_constant_acceleration_is_exact():
    # Angle quadratic in time: the not-a-knot cubic reproduces it (de Boor, from memory).
    sweep = SWEEPS["up-300-500rpm_s"]
    prof = speed_profile(sweep.rev_times())
    tg = np.linspace(prof.t_start, prof.t_end, 5001)
    assert_allclose(prof.rpm(tg), sweep.rpm(tg), rtol=1e-9)


def test_piecewise_linear_would_miss():
    # Why a cubic: constant speed per revolution (piecewise-linear angle) is off by far
    # more than the requirement at 300 rpm and 500 rpm/s (the speed changes by ~1/3 in
    # the first revolution).
    sweep = SWEEPS["up-300-500rpm_s"]
    rt = sweep.rev_times()
    rpm_linear = 60.0 / np.diff(rt)  # held over each revolution, e.g. at its start
    assert np.max(np.abs(rpm_linear / sweep.rpm(rt[:-1]) - 1.0)) > 0.1


def test_angle_convention_and_inverse():
    sweep = synth.smooth_sweep(600.0, 3000.0, 10.0)
    rt = sweep.rev_times()
    prof = speed_profile(rt)
    # conventions.py: angle 0 at the first reference event, k at the k-th
    assert_allclose(prof.angle_rev(rt), np.arange(rt.size), atol=1e-12)
    a = np.linspace(0, prof.n_revs, 777)
    assert_allclose(prof.angle_rev(prof.time_at_angle(a)), a, atol=1e-9)
    assert np.isnan(prof.angle_rev(rt[0] - 1e-3)) and np.isnan(prof.rpm(rt[-1] + 1e-3))
    assert prof.t_start == rt[0] and prof.t_end == rt[-1]
    assert_allclose(prof.rev_times_s, rt)
    assert_allclose(prof.rpm_at_angle([0.0, prof.n_revs]), sweep.rpm(rt[[0, -1]]), rtol=1e-3)


def test_jittery_events_fall_back_or_stay_monotone():
    # Heavy jitter can make the cubic non-monotone; the profile must stay monotone.
    rng = np.random.default_rng(0)
    rt = np.cumsum(np.r_[0.0, 0.02 * (1 + 0.45 * rng.uniform(-1, 1, 200))])
    prof = speed_profile(rt)
    tg = np.linspace(prof.t_start, prof.t_end, 100001)
    assert np.all(np.diff(prof.angle_rev(tg)) >= 0)
    assert np.all(prof.rpm(tg) > 0)


def test_too_few_events():
    with pytest.raises(TachError, match="Too few once-per-rev events.*need at least 5"):
        speed_profile([0.0, 0.1, 0.2, 0.3])
    with pytest.raises(TachError, match="Invalid value for 'rev_times_s'"):
        speed_profile([0.0, 0.1, 0.1, 0.3, 0.4])
    with pytest.raises(DspError, match="Invalid value for 'model'"):
        speed_profile(np.arange(6.0), model="linear")


class TestSegment:
    @staticmethod
    def _profile(phases):
        """Rev times of a piecewise-linear speed history [(duration_s, rpm_end), ...]."""
        t = [0.0]
        rpm = [phases[0][1] if phases[0][0] == 0 else 600.0]
        for dur, r1 in phases:
            t.append(t[-1] + dur)
            rpm.append(r1)
        tg = np.linspace(0, t[-1], 200001)
        rg = np.interp(tg, t, rpm)
        theta = np.concatenate([[0], np.cumsum(0.5 * (rg[1:] + rg[:-1]) * np.diff(tg) / 60)])
        k = np.arange(int(theta[-1]))
        return speed_profile(np.interp(k, theta, tg))

    def test_run_up_hold_coast_down(self):
        prof = self._profile([(20.0, 6000.0), (10.0, 6000.0), (15.0, 1000.0)])
        segs = segment(prof)
        assert [s.kind for s in segs] == ["run-up", "steady", "coast-down"]
        assert abs(segs[0].t_end_s - 20.0) < 1.0 and abs(segs[1].t_end_s - 30.0) < 1.0
        assert segs[0].rpm_start < 700 and segs[-1].rpm_end < 1100
        assert run_kind(segs) == "mixed"
        assert run_kind(segs[:2]) == "run-up"
        assert run_kind([Segment("steady", 0, 1, 3000, 3000)]) == "steady"

    def test_short_wobble_is_merged(self):
        prof = self._profile([(10.0, 3000.0), (0.5, 2990.0), (10.0, 6000.0)])
        segs = segment(prof, min_duration_s=2.0)
        assert [s.kind for s in segs] == ["run-up"]
        assert run_kind(segs) == "run-up"

    def test_bad_option(self):
        prof = self._profile([(5.0, 3000.0)])
        with pytest.raises(DspError, match="Invalid value for 'steady_tol_rpm_s'"):
            segment(prof, steady_tol_rpm_s=-1.0)


class TestSegmentQuantisedTach:
    def test_slow_sweep_with_a_sample_quantised_tach_is_one_run_up(self):
        # A square TTL tach gives edges only to the nearest sample (no slope to
        # interpolate): at 12 000 rpm and 25.6 kHz that is +-0.4 % of a revolution. A
        # 19.5 rpm/s sweep must still read as one run-up (closed form: linear sweep).
        from tests.synth import linear_sweep
        sw = linear_sweep(300.0, 19.5, 600.0)
        fs = 25600.0
        rt = np.round(sw.rev_times() * fs) / fs
        segs = segment(speed_profile(rt))
        assert [s.kind for s in segs] == ["run-up"]
        assert segs[0].rpm_end == pytest.approx(300 + 19.5 * 600, rel=5e-3)


def _quantised(rev_times, fs, phase=0.37):
    """Events of a tach edge sharper than the sample interval: each read half way between
    the two samples that straddle it (detect_edges on a step), the sample grid offset by
    ``phase`` samples from the sweep's t = 0."""
    return (np.floor(rev_times * fs + phase) + 0.5 - phase) / fs


class TestFitThroughJitter:
    """The speed model fits sample-quantised events instead of interpolating them."""

    def test_whittaker_equals_a_direct_sparse_solve(self):
        # Reference: the Whittaker-Henderson normal equations (I + lam D3'D3) u = t
        # (Whittaker 1923) solved directly with scipy.sparse; the dual banded solve must
        # agree to the direct solve's own rounding (condition number up to 1 + 64 lam).
        from scipy import sparse
        from scipy.sparse.linalg import spsolve
        from rundash.dsp.speed import _whittaker
        rng = np.random.default_rng(2)
        t = np.cumsum(0.02 + 1e-4 * rng.standard_normal(400))
        d3 = sparse.diags([-1.0, 3.0, -3.0, 1.0], [0, 1, 2, 3], shape=(397, 400))
        for lam in (1.0, 1e3, 1e6):
            tol = 1e-12 + 4e-16 * (1 + 64 * lam) * t.max()
            ref = spsolve((sparse.eye(400) + lam * d3.T @ d3).tocsc(), t)
            assert_allclose(_whittaker(t, lam), ref, rtol=0, atol=tol)
            w = rng.uniform(0.5, 4.0, 400)
            ref_w = spsolve((sparse.diags(w) + lam * d3.T @ d3).tocsc(), w * t)
            assert_allclose(_whittaker(t, lam, w), ref_w, rtol=0, atol=tol)

    @pytest.mark.parametrize("name, sweep, fs", [
        ("up-300-50rpm_s-5kHz", synth.linear_sweep(300.0, 50.0, 60.0), 5000.0),
        ("exp-coast-12000-25.6kHz", synth.exp_coast_down(12000.0, 30.0, 40.0), 25600.0),
        ("up-300-19.5rpm_s-25.6kHz", synth.linear_sweep(300.0, 19.5, 600.0), 25600.0),
    ])
    def test_quantised_events_meet_the_speed_requirement_only_when_fitted(self, name, sweep, fs):
        # Closed-form sweeps (tests/synth.py) read through a sample-quantised tach: one
        # sample is 0.3-1.7 deg of rotation here. Interpolating the events turns that
        # into speed swings of 0.2-0.3 % rms; the fit meets the 0.05 % requirement of the
        # speed model (rms over the record) and halves the angle error.
        q = _quantised(sweep.rev_times(), fs)
        raw = speed_profile(q, fit="never")
        fit = speed_profile(q)
        assert fit.fitted and not raw.fitted and "fitted through the tach event jitter" in fit.note
        tg = np.linspace(max(fit.t_start, raw.t_start), min(fit.t_end, raw.t_end), 100001)

        def errors(p):
            e_rpm = p.rpm(tg) / sweep.rpm(tg) - 1.0
            e_deg = 360.0 * (p.angle_rev(tg) - sweep.theta(tg))
            return np.sqrt(np.mean(e_rpm ** 2)), np.sqrt(np.mean(e_deg ** 2))

        (r_rpm, r_deg), (f_rpm, f_deg) = errors(raw), errors(fit)
        assert r_rpm > 1.5e-3 and f_rpm < 5e-4
        assert f_deg < 0.5 * r_deg
        assert_allclose(fit.measured_rev_times_s, q)

    def test_hard_start_stays_close_with_a_fit(self):
        # 60 rpm at 2000 rpm/s (the speed halves the revolution time from one turn to the
        # next): the events that the fit cannot follow are weighted up, so the fitted
        # speed is no worse than the interpolated one anywhere, and better overall.
        sweep = synth.linear_sweep(60.0, 2000.0, 3.0)
        q = _quantised(sweep.rev_times(), 5000.0)
        raw, fit = speed_profile(q, fit="never"), speed_profile(q)
        tg = np.linspace(max(fit.t_start, raw.t_start), min(fit.t_end, raw.t_end), 50001)
        e_raw = np.abs(raw.rpm(tg) / sweep.rpm(tg) - 1.0)
        e_fit = np.abs(fit.rpm(tg) / sweep.rpm(tg) - 1.0)
        assert np.sqrt(np.mean(e_fit ** 2)) < 0.5 * np.sqrt(np.mean(e_raw ** 2))
        assert np.max(e_fit) <= np.max(e_raw)

    def test_clean_events_are_interpolated(self):
        # Exact events (no jitter): the profile goes through them; the accuracy tests
        # above hold unchanged.
        prof = speed_profile(SWEEPS["s-curve-300-6000"].rev_times())
        from rundash.dsp.speed import FIT_JITTER_REV
        assert not prof.fitted and prof.note == "" and prof.jitter_deg / 360 < FIT_JITTER_REV
        with pytest.raises(DspError, match="Invalid value for 'fit'"):
            speed_profile(np.arange(10.0), fit="sometimes")


class TestSegmentRelative:
    """Steady means a small relative speed change over a minute, not a slow rate."""

    def test_slow_run_up_is_a_run_up(self):
        # 0.7 rpm/s for 54 minutes (600 -> 2868 rpm, closed-form linear sweep) never
        # exceeds the 10 rpm/s rate, but changes speed by 4 % a minute at 1000 rpm: a
        # run-up, read through a 5 kHz sample-quantised tach as well.
        sw = synth.linear_sweep(600.0, 0.7, 54 * 60.0)
        rt = sw.rev_times()
        for events in (rt, (np.floor(rt * 5000.0 + 0.37) + 0.5 - 0.37) / 5000.0):
            segs = segment(speed_profile(events))
            assert [s.kind for s in segs] == ["run-up"]
            assert segs[0].rpm_end == pytest.approx(600.0 + 0.7 * 54 * 60.0, rel=2e-3)

    def test_long_hold_with_hunting_and_drift_stays_steady(self):
        # 20 minutes at 3000 rpm with a +-0.3 % speed-controller hunt (period 20 s) and a
        # 1.5 % drift over the hold (0.075 % a minute): steady throughout.
        def rpm(t):
            return 3000.0 * (1 + 0.015 * t / 1200.0 + 0.003 * np.sin(2 * np.pi * t / 20.0))

        tg = np.linspace(0, 1200.0, 1_200_001)
        theta = np.concatenate([[0], np.cumsum(0.5 * (rpm(tg[1:]) + rpm(tg[:-1])) * np.diff(tg) / 60)])
        rt = np.interp(np.arange(int(theta[-1])), theta, tg)
        assert [s.kind for s in segment(speed_profile(rt))] == ["steady"]

    def test_bad_hold_window(self):
        prof = speed_profile(np.arange(200) * 0.02)
        with pytest.raises(DspError, match="Invalid value for 'hold_window_s'"):
            segment(prof, hold_window_s=0.0)

    def test_sample_floor_covers_revolutions_of_nearly_whole_samples(self):
        # 0.7 rpm/s for 54 minutes read at 512 Hz through a quantised edge: while a
        # revolution lasts nearly a whole number of samples (for ~100 s at a time) the
        # quantisation error drifts slowly and its third differences vanish, so the
        # jitter seen locally is too small and the fit follows the error's sawtooth. The
        # floor 1 / (sqrt(12) fs) (uniform error within a sample) keeps the fit smooth:
        # mean speeds over 0.1 s within 0.1 rpm rms of the closed form (linear sweep).
        sw = synth.linear_sweep(600.0, 0.7, 54 * 60.0)
        q = _quantised(sw.rev_times(), 512.0)
        prof = speed_profile(q, jitter_floor_s=1.0 / (np.sqrt(12.0) * 512.0))
        e = np.linspace(prof.t_start, prof.t_end, 30001)
        rpm = 60.0 * np.diff(prof.angle_rev(e)) / np.diff(e)
        err = rpm - sw.rpm(0.5 * (e[1:] + e[:-1]))
        assert np.sqrt(np.mean(err ** 2)) < 0.1
        with pytest.raises(DspError, match="Invalid value for 'jitter_floor_s'"):
            speed_profile(q, jitter_floor_s=-1.0)


def _long_record(n: int, seed: int) -> np.ndarray:
    """Event times of an invented run-up, hold and coast-down of n revolutions."""
    rng = np.random.default_rng(seed)
    q = n // 4
    rpm = np.concatenate([np.linspace(300.0, 6000.0, 2 * q), np.full(q, 6000.0),
                          np.linspace(6000.0, 250.0, n - 3 * q)])
    return np.concatenate([[0.0], np.cumsum(60.0 / rpm)]) + rng.normal(0.0, 1e-6, n + 1)


def test_spline_in_pieces_is_the_whole_spline():
    # Reference: scipy.interpolate.CubicSpline (not-a-knot) over every event in one solve.
    # The profile solves pieces of 65 536 intervals, each reaching 64 knots beyond its
    # ends; a knot's influence falls by at least half per knot (the tridiagonal matrix is
    # diagonally dominant; de Boor, A Practical Guide to Splines, rev. ed. 2001, ch. 4,
    # from memory), so the pieces agree with the one solve to rounding (measured: to the
    # bit on this record).
    from scipy.interpolate import CubicSpline, PchipInterpolator
    t = _long_record(150_000, 1)
    prof = speed_profile(t, fit="never")
    assert prof.model == "cubic"
    whole = CubicSpline(t, np.arange(t.size, dtype=float), bc_type="not-a-knot").c
    scale = np.max(np.abs(whole[:3]), axis=1, keepdims=True)
    assert np.max(np.abs(prof._c - whole[:3]) / scale) < 1e-12
    assert_allclose(prof.angle_rev(t[:-1]), np.arange(t.size - 1), rtol=0, atol=0)
    tg = np.linspace(t[1], t[-2], 100_001)
    ref_rpm = 60.0 * CubicSpline(t, np.arange(t.size, dtype=float),
                                 bc_type="not-a-knot")(tg, 1)
    assert_allclose(prof.rpm(tg), ref_rpm, rtol=1e-12)
    # an abrupt stop makes the cubic overshoot: PCHIP, local (three knots), to the bit
    rpm = np.linspace(300.0, 6000.0, 140_000)
    rpm[70_000:] = 30.0
    t2 = np.concatenate([[0.0], np.cumsum(60.0 / rpm)])
    prof2 = speed_profile(t2, fit="never")
    assert prof2.model == "pchip"
    assert np.array_equal(prof2._c, PchipInterpolator(t2, np.arange(t2.size, dtype=float)).c[:3])


def test_windowed_slope_is_least_squares_slope():
    # Reference: numpy.polyfit (degree 1) of the per-revolution mean speeds within each
    # window. The slopes come from running sums carried across pieces of 65 536
    # revolutions (windows straddling a piece's end are included); they are the same to
    # the bit as running sums over the whole record in one pass. Tolerance against
    # polyfit: differences of running sums lose about (distance from the record's
    # centre / a window's spread)^2 x eps of the slope (here up to 1e-3 relative); the
    # segmentation compares slopes with 10 rpm/s, so 0.01 rpm/s is far inside it.
    from rundash.dsp.speed import _windowed_slope
    t = _long_record(140_000, 2)
    tm = 0.5 * (t[1:] + t[:-1])
    r = 60.0 / np.diff(t)
    tg = np.concatenate([np.linspace(t[0] + 1.0, t[-1] - 1.0, 40), tm[[65_530, 65_536, 131_072]]])
    got = _windowed_slope(t, tg, 0.8)
    lo = np.searchsorted(tm, tg - 0.4, side="left")
    hi = np.searchsorted(tm, tg + 0.4, side="right")
    tc = tm - tm.mean()
    cs = [np.concatenate([[0.0], np.cumsum(v)]) for v in (np.ones_like(tc), tc, r, tc * tc, tc * r)]
    n, st, sr, stt, str_ = (c[hi] - c[lo] for c in cs)
    assert np.array_equal(got, (n * str_ - st * sr) / (n * stt - st * st))
    for g, s in zip(tg, got):
        w = (tm >= g - 0.4) & (tm <= g + 0.4)
        ref = np.polyfit(tm[w] - g, r[w], 1)[0]
        assert s == pytest.approx(ref, rel=1e-2, abs=1e-2)
