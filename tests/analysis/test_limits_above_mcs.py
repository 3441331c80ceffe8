"""Limits apply within the operating range: a run that goes above N_mc (an overspeed
trip test) is judged at the highest speed it reached up to N_mc; above it the levels are
reference only (common practice, no source)."""

import numpy as np
import pytest

from rundash.analysis.limits import check_levels
from rundash.ingest.profile_file import load_profile


def test_trip_test_is_judged_at_mcs_and_shown_above_it():
    s = np.linspace(1000, 6000, 5001)           # a coast-down from trip speed, say
    direct = np.where(s > 5500, 40.0, 20.0)     # 40 um pp above N_mc, 20 um pp below
    checks = check_levels(s, direct=direct, kind="proximity",
                          max_continuous_speed_rpm=5460.0, profile=load_profile("api617"))
    api = [c for c in checks if c.limit_id == "shaft-direct-pp-test-stand"]
    top = next(c for c in api if c.where == "top speed")
    above = next(c for c in api if c.where == "above N_mc")
    # API 617-style limit min(25.4, 25.4 sqrt(12000/N_mc)) um pp (from memory) = 25.4
    assert top.limit_value == pytest.approx(25.4)
    assert top.speed_rpm <= 5460 * 1.005 and top.level == 20.0
    # a shop-test rule (scope: a hold at N_mc in a shop test): a reference on a sweep
    assert top.status == "reference only"
    assert above.level == 40.0 and above.status == "reference only"
    assert "trip" in above.note


def test_run_within_the_range_has_no_above_window():
    s = np.linspace(1000, 5400, 3000)
    checks = check_levels(s, direct=np.full(s.size, 10.0), kind="proximity",
                          max_continuous_speed_rpm=5460.0, profile=load_profile("api617"))
    assert all(c.where != "above N_mc" for c in checks)
