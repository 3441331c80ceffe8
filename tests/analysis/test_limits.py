"""Tests of rundash/analysis/limits.py: zone values and level checks."""

import numpy as np
import pytest
from numpy.testing import assert_allclose

from rundash.analysis import find_criticals
from rundash.analysis.limits import (
    check_levels,
    shaft_zone_boundaries_um_pp,
    velocity_zone_boundaries_mm_s,
    zone_of,
)
from rundash.errors import AnalysisError
from rundash.ingest.profile_file import load_profile
from tests.analysis.closed_form import sdof_unbalance


def test_iso_shaft_zones():
    # ISO 7919-3 (carried into ISO 20816-3), from memory: 4800, 9000, 13200 / sqrt(n);
    # at 3600 rpm: 80 / 150 / 220 um p-p
    assert_allclose(shaft_zone_boundaries_um_pp(3600.0), (80.0, 150.0, 220.0))
    assert_allclose(shaft_zone_boundaries_um_pp(10000.0), (48.0, 90.0, 132.0))


@pytest.mark.parametrize("group, support, values", [
    # ISO 10816-3, mm/s rms, from memory
    ("group1", "rigid", (2.3, 4.5, 7.1)), ("group1", "flexible", (3.5, 7.1, 11.0)),
    ("group2", "rigid", (1.4, 2.8, 4.5)), ("group2", "flexible", (2.3, 4.5, 7.1)),
])
def test_iso_velocity_zones(group, support, values):
    assert velocity_zone_boundaries_mm_s(group, support) == values


def test_zone_of():
    b = (80.0, 150.0, 220.0)
    assert [zone_of(x, b) for x in (10, 80, 149.9, 221)] == ["A", "B", "B", "D"]


def _run():
    speed = np.linspace(300.0, 10000.0, 4000)
    vec = 20.0 * sdof_unbalance(speed, 3000.0, 0.05)  # 1X, um peak
    direct = 2 * np.abs(vec) + 5.0  # um p-p
    return speed, vec, direct


def test_check_levels_bands_and_top_speed():
    speed, vec, direct = _run()
    crit = find_criticals(speed, vec)
    checks = check_levels(speed, vector=vec, direct=direct, criticals=crit,
                          max_continuous_speed_rpm=10000.0, profile=load_profile("api617"))
    band = [c for c in checks if c.where == "critical band"]
    top = [c for c in checks if c.where == "top speed"]
    # through the critical: ISO zones and the API-style limit are references only
    assert band and all(c.status == "reference only" for c in band)
    peak_1x = next(c for c in band if c.quantity == "1x" and c.limit_id == "iso-shaft-zones")
    # SDOF closed form: 2 x 20 x 10.01 um p-p at the peak (Thomson & Dahleh 5th ed. 3.3)
    assert_allclose(peak_1x.level, 40.0 / (2 * 0.05 * np.sqrt(1 - 0.05 ** 2)), rtol=1e-3)
    # top speed: API-style direct limit min(25.4, 25.4 sqrt(12000/10000)) = 25.4; a
    # shop-test rule judged only in a hold at N_mc, so on this field run-up it is a
    # reference (rule scope, rundash/analysis/profiles/api617.toml)
    api = next(c for c in top if c.limit_id == "shaft-direct-pp-test-stand")
    assert_allclose(api.limit_value, 25.4)
    # highest direct level in the top 1 % of speed: at its low end (the response falls)
    assert 9900.0 <= api.speed_rpm <= 9903.0
    r = api.speed_rpm / 3000.0
    expected = 40 * r * r / np.hypot(1 - r * r, 0.1 * r) + 5.0
    assert_allclose(api.level, expected, rtol=1e-9)
    assert api.status == "reference only" and "shop" in api.note
    assert api.source.startswith("API 617") and "from memory" not in api.source
    # said once, for the whole profile (issue 12: not on every line)
    assert "from memory" in load_profile("api617").confidence_note()


def test_steady_top_speed_gives_zone_verdict():
    speed, vec, direct = _run()
    checks = check_levels(speed, direct=direct, max_continuous_speed_rpm=10000.0,
                          top_speed_is_steady=True)
    (c,) = checks
    # 49.0 um p-p at 9900 rpm: A/B 4800/sqrt(9900) = 48.2, B/C 90.5 -> zone B, acceptable
    assert c.zone == "B" and c.status == "within"
    (d,) = check_levels(speed, direct=direct + 50.0, max_continuous_speed_rpm=10000.0,
                        top_speed_is_steady=True)
    assert d.zone == "C" and d.status == "exceeds"


def test_velocity_uses_rms():
    speed = np.linspace(500.0, 3000.0, 100)
    vec = np.full(100, 4.0 + 0j)  # mm/s peak -> 2.83 mm/s rms: zone B of group 1 rigid
    (c,) = check_levels(speed, vector=vec, kind="velocity", amplitude_factor=1.0,
                        max_continuous_speed_rpm=3000.0, top_speed_is_steady=True)
    assert_allclose(c.level, 4.0 / np.sqrt(2))
    assert c.zone == "B" and c.units == "mm/s rms"


def test_validation():
    with pytest.raises(AnalysisError, match="Invalid value for 'kind'"):
        check_levels([1.0, 2.0], kind="strain", max_continuous_speed_rpm=10.0)
    with pytest.raises(AnalysisError, match="Invalid value for 'direct'"):
        check_levels([1.0, 2.0], direct=[1.0], max_continuous_speed_rpm=10.0)
    with pytest.raises(AnalysisError, match="Invalid value for 'group/support'"):
        velocity_zone_boundaries_mm_s("group3", "rigid")
