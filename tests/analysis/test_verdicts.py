"""Tests of rundash/analysis/verdicts.py: margins, outright failures, JSON form."""

import json

import numpy as np
import pytest
from numpy.testing import assert_allclose

import rundash
from rundash.analysis import check_levels, find_criticals, judge, summarize
from rundash.errors import ConfigError
from rundash.ingest.profile_file import load_profile
from tests.analysis.closed_form import sdof_unbalance

SPEED = np.linspace(300.0, 9000.0, 3000)


def _crit(fn, zeta):
    (c,) = find_criticals(SPEED, 10.0 * sdof_unbalance(SPEED, fn, zeta))
    return c


def test_margin_below_and_above():
    low, high, near = _crit(3000.0, 0.05), _crit(8000.0, 0.05), _crit(6800.0, 0.05)
    vs = judge([low, high, near], min_operating_speed_rpm=4000.0, max_continuous_speed_rpm=6000.0,
               profile=load_profile("api617"), probe="brg1-X", amplitude_units="um pp")
    v_low, v_high, v_near = vs
    # actual margins: 100 (N_min - Nc)/N_min below, 100 (Nc - N_mc)/N_mc above (DEVELOPERS.md "Reference values")
    assert_allclose(v_low.separation_margin_pct, 100 * (4000 - low.speed_rpm) / 4000)
    assert_allclose(v_high.separation_margin_pct, 100 * (high.speed_rpm - 6000) / 6000)
    # required from the API 617-style rule with the measured AF (about 9.9)
    af = low.af_governing
    assert_allclose(v_low.required_margin_pct, min(16, 17 * (1 - 1 / (af - 1.5))))
    assert_allclose(v_high.required_margin_pct, min(26, 10 + 17 * (1 - 1 / (high.af_governing - 1.5))))
    assert v_low.side == "below" and v_low.verdict == "pass"  # 24.8 % >= 14.9 %
    assert v_high.side == "above" and v_high.verdict == "pass"  # 33.5 % >= 24.9 %
    assert v_near.side == "above" and v_near.verdict == "fail"  # 13.6 % < 24.9 %
    assert "required" in v_near.reason and "API 617" in v_near.reason
    # the confidence is said once for the profile, not on every reason
    assert "from memory" not in v_near.reason


def test_inside_range_fails_and_critically_damped_passes():
    inside = _crit(5000.0, 0.05)
    damped = _crit(5000.0, 0.3)
    v_in, v_cd = judge([inside, damped], min_operating_speed_rpm=4000.0,
                       max_continuous_speed_rpm=6000.0, profile=load_profile("api617"))
    assert v_in.verdict == "fail" and "inside the operating range" in v_in.reason
    assert damped.af_governing < 2.5
    assert v_cd.verdict == "pass" and "no separation margin required" in v_cd.reason


def test_amplitude_only_not_judged():
    v = 10.0 * sdof_unbalance(SPEED, 3000.0, 0.05)
    v = v + 8.0 * np.exp(-0.5 * ((SPEED - 4500.0) / 60.0) ** 2) * np.exp(-1j * np.radians(176.0))
    crits = find_criticals(SPEED, v)
    assert crits[1].classification == "amplitude-only"
    verdicts = judge(crits, min_operating_speed_rpm=6000.0, max_continuous_speed_rpm=7000.0,
                     profile=load_profile("fixed-margin"))
    assert verdicts[1].verdict == "not judged"
    run = summarize(verdicts, profile=load_profile("fixed-margin"), min_operating_speed_rpm=6000.0,
                    max_continuous_speed_rpm=7000.0)
    assert run.overall in ("not judged", "fail")


def test_json_schema_and_caution():
    c = _crit(3000.0, 0.05)
    vs = judge([c], min_operating_speed_rpm=4000.0, max_continuous_speed_rpm=6000.0,
               profile=load_profile("api610"), probe="brg1-X", amplitude_units="um pp",
               mode_hints=["cylindrical (translational)"])
    checks = check_levels(SPEED, vector=10.0 * sdof_unbalance(SPEED, 3000.0, 0.05), criticals=[c],
                          max_continuous_speed_rpm=6000.0, profile=load_profile("api610"))
    run = summarize(vs, profile=load_profile("api610"), min_operating_speed_rpm=4000.0,
                    max_continuous_speed_rpm=6000.0, level_checks=checks)
    d = json.loads(json.dumps(run.to_json_dict()))  # plain JSON
    assert d["schema"] == "rundash.run-verdict/1"
    assert d["caution"] == rundash.CAUTION and vs[0].caution == rundash.CAUTION
    assert d["profile"]["needs_confirmation"] is True
    (conf,) = [n for n in d["notes"] if n.startswith("Guidance profile 'api610'")]
    assert "from memory" in conf and "Confirm against the edition" in conf
    (crit,) = d["criticals"]
    for key in ("probe", "direction", "speed_rpm", "peak_amplitude", "amplitude_units",
                "phase_change_deg", "af_half_power", "af_phase", "af_fit", "damping_ratio_fit",
                "confidence", "mode_hint", "separation_margin_pct", "required_margin_pct",
                "margin_verdict", "profile"):
        assert key in crit
    assert crit["probe"] == "brg1-X" and crit["mode_hint"] == "cylindrical (translational)"
    assert crit["required_margin_pct"] == 20.0  # API 610 style: 20 % (zeta 0.05 < 0.15)
    assert d["limit_checks"] and all("status" in x for x in d["limit_checks"])


def test_validation():
    c = _crit(3000.0, 0.05)
    with pytest.raises(ConfigError, match="Invalid value for 'min_operating_speed_rpm/max_continuous_speed_rpm'"):
        judge([c], min_operating_speed_rpm=5000.0, max_continuous_speed_rpm=4000.0, profile=load_profile("api617"))
    with pytest.raises(ConfigError, match="Invalid value for 'mode_hints'"):
        judge([c], min_operating_speed_rpm=4000.0, max_continuous_speed_rpm=5000.0,
              profile=load_profile("api617"), mode_hints=[])


class TestRangeNotReached:
    """A run that never reached the operating range is not judged (issue 16)."""

    def test_run_up_below_the_range_is_not_judged(self):
        from rundash.analysis.verdicts import summarize
        from rundash.ingest.profile_file import load_profile
        prof = load_profile("api617")
        # 600 -> 1200 rpm, range 2600-2900 rpm, nothing found: not a pass
        rv = summarize((), profile=prof, min_operating_speed_rpm=2600.0,
                       max_continuous_speed_rpm=2900.0, top_speed_rpm=1200.0)
        assert rv.overall == "not judged"
        assert any(n.startswith("the run never reached the operating range: top speed 1200 rpm, "
                                "range 2600-2900 rpm") for n in rv.notes)
        # reaching the range changes nothing else
        rv = summarize((), profile=prof, min_operating_speed_rpm=2600.0,
                       max_continuous_speed_rpm=2900.0, top_speed_rpm=2900.0)
        assert rv.overall == "pass"
