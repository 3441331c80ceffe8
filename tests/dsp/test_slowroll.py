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


class TestChooseBySteadiness:
    """The automatic window: steady 1X, well below the first critical, not the longest dwell.

    Vectors: SDOF unbalance response (fn 3000 rpm, zeta 0.05; Thomson & Dahleh, 5th ed.,
    sec. 3.3) plus a constant runout vector; rules of choose_slow_roll_window (our own
    tolerances, DEVELOPERS.md, Reference values).
    """

    @staticmethod
    def _run():
        # 30 s at 200 rpm, a 10-minute warm-up hold at 1200 rpm, a sweep to 10 000 rpm
        speed = np.concatenate([np.full(100, 200.0), np.linspace(200, 1200, 60),
                                np.full(12000, 1200.0), np.linspace(1200, 10000, 3000)])
        r = speed / 3000.0
        dyn = 20.0 * r * r / (1 - r * r + 0.1j * r)
        runout = 4.0 * np.exp(-1j)
        rng = np.random.default_rng(0)
        vec = np.stack([dyn + runout, 1j * dyn + 0.5 * runout])
        vec = vec + 0.02 * (rng.standard_normal(vec.shape) + 1j * rng.standard_normal(vec.shape))
        return speed, vec

    def test_window_at_slow_roll_not_at_the_warm_up_hold(self):
        from rundash.dsp import choose_slow_roll_window
        speed, vec = self._run()
        # the dwell rule takes the hold (its most time below 15 % of the top speed)
        lo, hi = auto_slow_roll_window(speed, np.arange(speed.size) * 0.05)
        assert lo <= 1200.0 <= hi
        ch = choose_slow_roll_window(speed, vec, first_critical_rpm=3007.5)
        lo, hi = ch.window
        assert lo == pytest.approx(200.0) and hi <= 0.2 * 3007.5
        assert "chosen from the data" in ch.note and "first candidate critical" in ch.note
        # without a candidate critical the limit is 15 % of the top speed; the lowest
        # steady band still wins
        assert choose_slow_roll_window(speed, vec).window[0] == pytest.approx(200.0)

    def test_no_window_below_the_critical_is_said(self):
        from rundash.dsp import choose_slow_roll_window
        speed, vec = self._run()
        keep = speed >= 1000.0  # the record starts at the warm-up hold
        ch = choose_slow_roll_window(speed[keep], vec[:, keep], first_critical_rpm=3007.5)
        assert ch.window is None and ch.limit_rpm == pytest.approx(601.5)
        assert ch.note.startswith("no slow-roll window qualifies: no band below 602 rpm (20 % "
                                  "of the first candidate critical at 3008 rpm)")
        assert "[processing] slow_roll_rpm" in ch.note

    def test_a_rising_response_is_not_slow_roll(self):
        # a sweep from 300 rpm through a critical at 1000 rpm (no candidate critical
        # given): from the first revolution the dynamic response (r^2 / (1 - r^2)) moves
        # the 1X by more than 10 % of the runout within any band, so nothing qualifies
        from rundash.dsp import choose_slow_roll_window
        speed = np.linspace(300.0, 6000.0, 4000)
        r = speed / 1000.0
        vec = (20.0 * r * r / (1 - r * r + 0.1j * r) + 3.0)[None, :]
        ch = choose_slow_roll_window(speed, vec)
        assert ch.window is None and ch.note.startswith("no slow-roll window qualifies")

    def test_low_blocks_spread_wider_than_a_band_give_none_not_index_error(self):
        # issue 16: a coast-down to zero, a stop and a restart left a few low blocks
        # spread wider than any band; the dwell rule failed with IndexError
        s = np.array([3000.0] * 50 + [40.0, 120.0, 200.0, 280.0, 360.0, 440.0])
        assert auto_slow_roll_window(s, np.arange(s.size) * 0.1, width_fraction=0.02) is None


def test_rows_read_one_at_a_time_choose_the_same_window():
    # the pipeline gives the proximity probes' 1X as rows read from a file one at a time
    # (a VectorRows): the same window, note and first candidate as from the array (the
    # same computation, no outside reference); a row of the wrong length is named
    from rundash.analysis.run_edges import first_candidate_rpm
    from rundash.dsp import choose_slow_roll_window

    speed, vec = TestChooseBySteadiness._run()
    read = []

    class Rows:
        def __len__(self):
            return vec.shape[0]

        def __getitem__(self, i):
            read.append(i)
            return vec[i].astype(np.complex64)

    v64 = vec.astype(np.complex64)
    assert first_candidate_rpm(speed, Rows()) == first_candidate_rpm(speed, v64)
    a = choose_slow_roll_window(speed, v64, first_critical_rpm=3007.5)
    b = choose_slow_roll_window(speed, Rows(), first_critical_rpm=3007.5)
    assert a == b and a.window is not None
    assert set(read) == {0, 1}

    class Short(Rows):
        def __getitem__(self, i):
            return vec[i, :-1]

    with pytest.raises(DspError, match="vectors row 0"):
        choose_slow_roll_window(speed, Short())
