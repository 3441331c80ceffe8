"""Borderline margin verdicts near the AF 2.5 threshold: heavily damped single-mode runs,
full and truncated just past the upper half-power point, are never a confident fail.

The response is the closed-form single-degree-of-freedom unbalance response
e r^2 / (1 - r^2 + 2 j zeta r) (W. T. Thomson and M. D. Dahleh, Theory of Vibration with
Applications, 5th ed., 1998, sec. 3.3); its exact half-power AF (API 684 definition)
from the quartic in tests/analysis/closed_form.py: 2.40 at zeta 0.18, 2.07 at 0.20. The
rule: API 617-style, from memory (DEVELOPERS.md, Reference values): AF < 2.5 needs no
margin, above N_mc a margin of min(26, 10 + 17 (1 - 1/(AF - 1.5))) %.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import brentq

from rundash.analysis import find_criticals
from rundash.analysis.verdicts import judge, summarize
from rundash.ingest.profile_file import load_profile
from tests.analysis.closed_form import sdof_half_power_af, sdof_unbalance

FN = 3000.0
N_MIN, N_MC = 2400.0, 2900.0  # the critical above N_mc, 7 % away: short of the 10 % base


def _n2(zeta):
    """Upper half-power speed of the closed form (rpm)."""
    rp = 1 / np.sqrt(1 - 2 * zeta ** 2)
    peak = abs(sdof_unbalance(FN * rp, FN, zeta))
    return brentq(lambda n: abs(sdof_unbalance(n, FN, zeta)) - peak / np.sqrt(2), FN * rp,
                  3 * FN)


def _verdicts(zeta, end_rpm, seed=0):
    s = np.linspace(300.0, end_rpm, 3000)
    rng = np.random.default_rng(seed)
    v = 20.0 * sdof_unbalance(s, FN, zeta) + 0.01 * (rng.standard_normal(s.size)
                                                      + 1j * rng.standard_normal(s.size))
    crits = find_criticals(s, v)
    prof = load_profile("api617")
    mv = judge(crits, min_operating_speed_rpm=N_MIN, max_continuous_speed_rpm=N_MC,
               profile=prof, data_range_rpm=(s[0], s[-1]))
    run = summarize(mv, profile=prof, min_operating_speed_rpm=N_MIN,
                    max_continuous_speed_rpm=N_MC, top_speed_rpm=end_rpm)
    return mv, run


@pytest.mark.parametrize("zeta", [0.18, 0.20])
@pytest.mark.parametrize("truncated", [False, True])
def test_heavily_damped_mode_is_borderline_or_critically_damped(zeta, truncated):
    assert sdof_half_power_af(zeta) < 2.5  # 2.40 and 2.07: critically damped by the rule
    end = 1.02 * _n2(zeta) if truncated else 3.0 * FN
    mv, run = _verdicts(zeta, end)
    assert len(mv) == 1
    (v,) = mv
    assert v.side == "above"
    assert v.verdict in ("borderline", "pass"), v.reason
    if v.verdict == "pass":
        assert "critically damped" in v.reason
    else:
        # both readings said, with the verdict each gives
        assert "pass (" in v.reason and "fail (" in v.reason
    assert run.overall in ("borderline", "pass")


def test_truncated_run_at_zeta_018_says_the_edge():
    # data ending 2 % past N2: the half-power points are not well inside the data
    mv, _ = _verdicts(0.18, 1.02 * _n2(0.18))
    (v,) = mv
    assert "of the data's last speed" in v.reason


def test_clear_cases_stay_confident():
    # zeta 0.05 (AF 9.9): 7 % above N_mc against 22.1 % required, a fail by every reading
    s = np.linspace(300.0, 9000.0, 3000)
    crits = find_criticals(s, 20.0 * sdof_unbalance(s, FN, 0.05))
    (v,) = judge(crits, min_operating_speed_rpm=N_MIN, max_continuous_speed_rpm=N_MC,
                 profile=load_profile("api617"), data_range_rpm=(s[0], s[-1]))
    assert v.verdict == "fail"
