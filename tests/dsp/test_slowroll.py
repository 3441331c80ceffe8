"""Tests of rundash.dsp.slowroll.

Reference: the definition of slow-roll compensation (DEVELOPERS.md "Reference values"; common
practice, no source): subtracting, as complex vectors, a constant runout vector that was
added to a known dynamic response must give back the dynamic response.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from rundash.dsp import auto_slow_roll_window, compensate, slow_roll_vector
from rundash.errors import DspError


def _run(dwell_rpm=500.0):
    """Block speeds of a run-up with a dwell at ``dwell_rpm`` (invented), and vectors:
    SDOF unbalance response (fn 3000 rpm, zeta 0.05) plus a constant runout vector."""
    speed = np.concatenate([np.linspace(200, dwell_rpm, 20), np.full(40, dwell_rpm),
                            np.linspace(dwell_rpm, 9000, 400)])
    time_s = np.arange(speed.size) * 0.1
    r = speed / 3000.0
    dyn = 10.0 * r * r / (1 - r * r + 2j * 0.05 * r)
    runout = 3.0 * np.exp(-1j * np.radians(200.0))
    vec = np.stack([dyn + runout, 0.5 * dyn + 2 * runout])[:, None, :]  # (2 ch, 1 order, n)
    return speed, time_s, dyn, runout, vec


def test_auto_window_finds_the_low_dwell():
    speed, time_s, *_ = _run()
    lo, hi = auto_slow_roll_window(speed, time_s)
    # rule: band 5 % of top speed wide, below 15 % of top speed, most blocks
    assert lo <= 500.0 <= hi and hi - lo <= 0.05 * 9000 + 1e-9 and hi <= 0.15 * 9000


def test_compensation_recovers_dynamic_response():
    speed, time_s, dyn, runout, vec = _run()
    window = auto_slow_roll_window(speed, time_s)
    sr = slow_roll_vector(speed, vec, window)
    assert sr.shape == (2, 1)
    # at 500 rpm the dynamic part is small but not zero: r^2 = 0.028 of the static
    # deflection; the recovered vector differs from the truth by exactly that mean.
    sel = (speed >= window[0]) & (speed <= window[1])
    assert_allclose(sr[0, 0], runout + dyn[sel].mean(), rtol=1e-12)
    comp = compensate(vec, sr)
    assert_allclose(comp[0, 0], dyn - dyn[sel].mean(), atol=1e-12)
    # well above slow roll the runout is gone to within the dwell's dynamic part
    assert np.max(np.abs(comp[0, 0] - dyn)) <= np.abs(dyn[sel]).max() + 1e-12


def test_no_window_when_too_few_low_speed_blocks():
    speed = np.linspace(3000, 9000, 100)
    assert auto_slow_roll_window(speed, np.arange(100) * 0.1) is None


def test_errors():
    speed, time_s, _, _, vec = _run()
    with pytest.raises(DspError, match="No block in the slow-roll window"):
        slow_roll_vector(speed, vec, (20000.0, 21000.0))
    with pytest.raises(DspError, match="Invalid value for 'window'"):
        slow_roll_vector(speed, vec, (600.0, 500.0))
    with pytest.raises(DspError, match="Invalid value for 'sr'"):
        compensate(vec, np.zeros(3))
    with pytest.raises(DspError, match="Invalid value for 'max_fraction'"):
        auto_slow_roll_window(speed, time_s, max_fraction=0.0)


class TestWindowOnASweep:
    def test_coast_down_window_sits_at_the_lowest_speeds(self):
        # A coast-down with a constant deceleration (friction, closed form): per-rev
        # blocks crowd the higher speeds, but the machine spends the most time at the
        # lowest ones, where the dynamic response is smallest (common practice, no
        # source): the band must start at the bottom of the record.
        from tests.synth import linear_sweep
        sw = linear_sweep(6000.0, -130.0, 44.0)  # 6000 -> 280 rpm
        rt = sw.rev_times()
        speed = 60.0 / np.diff(rt)
        t = 0.5 * (rt[1:] + rt[:-1])
        lo, hi = auto_slow_roll_window(speed, t)
        assert lo == pytest.approx(speed.min(), rel=1e-6)
        assert hi <= 0.15 * speed.max() + 1e-9
