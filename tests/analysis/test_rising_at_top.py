"""rising_at_top: a response still climbing at the top speed is reported as a note."""

import numpy as np
import pytest

from rundash.analysis.criticals import rising_at_top
from tests.analysis.closed_form import sdof_unbalance as _sdof  # SDOF unbalance response


class TestRisingAtTop:
    def test_critical_above_the_top_speed_is_noted(self):
        s = np.linspace(500, 6000, 4000)
        got = rising_at_top(s, _sdof(s, 6650, 0.1))
        assert got is not None
        assert got.to_rpm == pytest.approx(6000)
        # closed form: mean |H| over the top quarter of the examined span (5862.5-6000
        # rpm) against its first eighth (5450-5518.75 rpm), fn 6650 rpm, zeta 0.1
        ratio = abs(_sdof(np.linspace(5862.5, 6000, 500), 6650, 0.1)).mean() / \
            abs(_sdof(np.linspace(5450, 5518.75, 500), 6650, 0.1)).mean()
        assert got.rise_pct == pytest.approx(100 * (ratio - 1), rel=0.05)
        assert got.lag_change_deg > 5  # the lag rises toward a resonance ahead
        assert "may lie above 6000 rpm" in got.note

    def test_past_a_critical_the_response_falls_and_nothing_is_noted(self):
        s = np.linspace(500, 6000, 4000)
        assert rising_at_top(s, _sdof(s, 3000, 0.05)) is None

    def test_flat_noise_is_not_a_rise(self):
        rng = np.random.default_rng(3)
        s = np.linspace(500, 6000, 4000)
        v = 1 + 0.05 * (rng.standard_normal(s.size) + 1j * rng.standard_normal(s.size))
        assert rising_at_top(s, v) is None
