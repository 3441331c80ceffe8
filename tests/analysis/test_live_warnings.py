"""rundash.analysis.live_warnings: pure warning logic against constant-acceleration
kinematics (t = distance / acceleration; common practice, no source)."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from rundash.analysis.live_warnings import (
    ExpectedBand, LiveWarnings, WarningSettings, expected_bands, speed_and_acceleration,
)
from rundash.errors import AnalysisError


def _drive(mon, t, rpm, acc, levels=None, tach=None):
    out = []
    for i in range(t.size):
        out += mon.update(time_s=t[i], speed_rpm=rpm[i], accel_rpm_s=acc,
                          levels=None if levels is None else {"P": levels[i]},
                          tach_ok=True if tach is None else bool(tach[i]))
    return out


class TestSpeedAndAcceleration:
    @pytest.mark.parametrize("rpm0, acc", [(600.0, 100.0), (3000.0, -250.0), (1200.0, 0.0)])
    def test_constant_acceleration_is_exact(self, rpm0, acc):
        # theta(t) = rpm0/60 t + acc/120 t^2: the mean speed over a revolution equals the
        # speed at its mid time, so the line fit is exact (kinematics)
        f0, a = rpm0 / 60.0, acc / 60.0
        k = np.arange(60, dtype=float)
        t = (-f0 + np.sqrt(f0 * f0 + 2 * a * k)) / a if a else k / f0
        rpm, got = speed_and_acceleration(t, window_s=1.0)
        assert_allclose(got, acc, atol=1e-6 * max(abs(acc), 1))
        assert_allclose(rpm, rpm0 + acc * t[-1], rtol=1e-9)

    def test_too_few_events(self):
        assert speed_and_acceleration([0.0]) == (None, None)
        assert speed_and_acceleration([0.0, 0.1]) == (600.0, None)


class TestExpectedBands:
    def test_overlapping_bands_merge(self):
        b = expected_bands([(3000, 2850, 3150, "run 1"), (3050, 2900, 3200, "run 2"),
                            (7000, 6800, 7200, "run 1")])
        assert [(x.lo_rpm, x.hi_rpm) for x in b] == [(2850, 3200), (6800, 7200)]
        assert b[0].speed_rpm == 3025 and b[0].sources == ("run 1", "run 2")

    def test_narrow_or_unknown_band_widened(self):
        (b,) = expected_bands([(4000, float("nan"), 4010, "")], min_width_pct=2.0)
        assert (b.lo_rpm, b.hi_rpm) == (3920, 4080)

    def test_invalid(self):
        with pytest.raises(AnalysisError, match="Invalid value for 'band'"):
            ExpectedBand(3000, 3100, 3200)
        with pytest.raises(AnalysisError, match="Invalid value for 'lead_time_s'"):
            WarningSettings(lead_time_s=0)


class TestLiveWarnings:
    band = ExpectedBand(3000, 2900, 3100)

    def test_approach_warned_lead_time_ahead(self):
        mon = LiveWarnings([self.band], settings=WarningSettings(lead_time_s=10.0))
        t = np.arange(0, 40, 0.1)
        rpm = 1000 + 100 * t  # reaches 2900 at t = 19 s
        ev = _drive(mon, t, rpm, 100.0)
        a = next(e for e in ev if e.kind == "approaching")
        assert_allclose(a.time_s, 9.0, atol=0.1 + 1e-9)  # 10 s before 19 s
        assert_allclose(a.details["time_to_band_s"], (2900 - a.speed_rpm) / 100.0)
        kinds = [e.kind for e in ev]
        assert kinds == ["approaching", "entered-band", "left-band"]
        assert_allclose(ev[1].time_s, 19.0, atol=0.1 + 1e-9)

    def test_no_approach_when_steady_or_moving_away(self):
        mon = LiveWarnings([self.band])
        t = np.arange(0, 20, 0.5)
        assert _drive(mon, t, np.full(t.size, 2500.0), 0.5) == []
        assert _drive(mon, t, 2500 - 10 * t, -10.0) == []

    def test_coast_down_approach_from_above(self):
        mon = LiveWarnings([self.band], settings=WarningSettings(lead_time_s=5.0))
        t = np.arange(0, 20, 0.1)
        ev = _drive(mon, t, 4000 - 100 * t, -100.0)  # reaches 3100 at t = 9 s
        a = ev[0]
        assert a.kind == "approaching" and "falling" in a.message
        assert_allclose(a.time_s, 4.0, atol=0.1 + 1e-9)

    def test_dwell_once_per_stay(self):
        mon = LiveWarnings([self.band], settings=WarningSettings(dwell_limit_s=5.0))
        t = np.arange(0, 30, 0.25)
        rpm = np.where(t < 20, 3000.0, 3500.0)
        ev = _drive(mon, t, rpm, 0.0)
        kinds = [e.kind for e in ev]
        assert kinds == ["entered-band", "dwell", "left-band"]
        assert_allclose(ev[1].time_s, 5.25)  # first update past 5 s inside
        assert_allclose(ev[2].details["dwell_s"], 20.0)

    def test_level_alarm_with_hysteresis(self):
        mon = LiveWarnings(alarms={"P": (50.0, "um pp", "test")})
        lv = np.array([10, 49, 51, 60, 48, 46, 44, 60, 30], float)
        ev = _drive(mon, np.arange(lv.size, dtype=float), np.full(lv.size, 1000.0), 0.0, lv)
        assert [(e.kind, e.time_s) for e in ev] == [
            ("level-high", 2.0), ("level-normal", 6.0), ("level-high", 7.0),
            ("level-normal", 8.0)]

    def test_tach_lost_and_back(self):
        mon = LiveWarnings([self.band])
        tach = np.array([1, 1, 0, 0, 1, 1], bool)
        ev = _drive(mon, np.arange(6.0), np.full(6, 1000.0), 0.0, tach=tach)
        assert [(e.kind, e.severity, e.time_s) for e in ev] == [
            ("tach-lost", "alarm", 2.0), ("tach-restored", "info", 4.0)]
        assert mon.active() == []
