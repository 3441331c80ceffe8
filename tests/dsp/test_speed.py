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
