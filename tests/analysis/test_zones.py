"""ISO zones done properly: the part and class by the machine, defaults said, a new
machine expected in zone A, pumps and large turbine-generator sets on their own parts.

Table values (all from memory, not checked against the standards' text; the tests pin
what the project states):
- ISO 10816-3:2009 Annex A, Tables A.1/A.2: group 1 rigid 2.3 / 4.5 / 7.1 mm/s rms,
  group 2 flexible 2.3 / 4.5 / 7.1, group 1 flexible 3.5 / 7.1 / 11.0, group 2 rigid
  1.4 / 2.8 / 4.5;
- ISO 10816-7:2009 Annex A (pumps): category I above 200 kW 3.5 / 5.0 / 7.6, up to
  200 kW 2.5 / 4.0 / 6.6; category II above 200 kW 4.2 / 6.1 / 7.6, up to 200 kW
  3.2 / 5.1 / 6.6 (low confidence);
- ISO 10816-2:2009 Annex A (steam turbines and generators above 50 MW): 1500/1800 r/min
  2.8 / 5.3 / 8.5, 3000/3600 r/min 3.8 / 7.5 / 11.8;
- API 610 11th ed. shop test (from memory): shaft min(50, sqrt(5.2e6/N)) um p-p.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from rundash.analysis.limits import check_levels
from rundash.analysis.zones import ZoneSettings
from rundash.errors import ConfigError
from rundash.ingest.machine_file import parse_machine_description
from rundash.ingest.profile_file import load_profile
from tests.conftest import EXAMPLE_MACHINE


@pytest.mark.parametrize("settings, speed, bounds", [
    (ZoneSettings(), 3000.0, (2.3, 4.5, 7.1)),
    (ZoneSettings(group="group2", support="rigid"), 3000.0, (1.4, 2.8, 4.5)),
    (ZoneSettings(part="10816-7"), 3000.0, (3.5, 5.0, 7.6)),
    (ZoneSettings(part="10816-7", pump_category="II", pump_power="up-to-200kW"), 3000.0,
     (3.2, 5.1, 6.6)),
    (ZoneSettings(part="10816-2"), 1500.0, (2.8, 5.3, 8.5)),
    (ZoneSettings(part="10816-2"), 3600.0, (3.8, 7.5, 11.8)),
])
def test_table_values(settings, speed, bounds):
    row = settings.velocity_row(speed)
    assert (row["ab"], row["bc"], row["cd"]) == bounds
    assert row["confidence"] == "from memory"


def test_pumps_on_their_part_and_the_defaults_said():
    zs = ZoneSettings.for_machine("pump")
    assert zs.part == "10816-7" and set(zs.defaulted) == {"part", "pump_category",
                                                          "pump_power", "new_machine"}
    assert zs.describe() == ("ISO 10816-7 (default), category I (default), rated power "
                             "above-200kW (default); zones A and B acceptable for long-term "
                             "operation (default)")
    assert ZoneSettings.for_machine("compressor").part == "10816-3"


def _velocity(level_mm_s_rms, zs):
    s = np.linspace(2900.0, 3000.0, 50)
    vec = np.full(s.size, level_mm_s_rms * math.sqrt(2.0) + 0j)  # 1X peak
    (c,) = check_levels(s, vector=vec, kind="velocity", amplitude_factor=1.0,
                        max_continuous_speed_rpm=3000.0, top_speed_is_steady=True, zones=zs)
    return c


def test_new_machine_expects_zone_a():
    # 3.0 mm/s rms: zone B of ISO 10816-3 group 1 rigid (A/B 2.3, B/C 4.5)
    old = _velocity(3.0, ZoneSettings())
    new = _velocity(3.0, ZoneSettings(new_machine=True))
    assert old.zone == new.zone == "B"
    assert old.status == "within" and new.status == "exceeds"
    assert "zone A expected" in new.note
    # the same level on a pump (ISO 10816-7 category I above 200 kW: A/B 3.5): zone A
    pump = _velocity(3.0, ZoneSettings(part="10816-7"))
    assert pump.zone == "A" and pump.limit_id == "iso-pump-zones-I-above-200kW"
    assert "ISO 10816-7" in pump.source


def test_machine_file_zones_table():
    d = parse_machine_description(EXAMPLE_MACHINE + '\n[zones]\ngroup = "group2"\n'
                                  'support = "flexible"\nnew_machine = true\n', "m.toml")
    zs = ZoneSettings.for_machine(d.machine.kind, **vars(d.zones))
    assert (zs.part, zs.group, zs.support, zs.new_machine) == ("10816-3", "group2",
                                                               "flexible", True)
    assert zs.defaulted == ("part",)
    with pytest.raises(ConfigError, match=r"\[zones\]\.pump_category: does not apply to ISO "
                                          r"10816-3"):
        parse_machine_description(EXAMPLE_MACHINE + '\n[zones]\npump_category = "I"\n', "m.toml")
    with pytest.raises(ConfigError, match=r"\[zones\]\.part"):
        parse_machine_description(EXAMPLE_MACHINE + '\n[zones]\npart = "7919"\n', "m.toml")


def test_pump_profile_has_shop_test_limits():
    p = load_profile("api610")
    shaft = next(x for x in p.limits if x.id == "shaft-direct-pp-pump-test")
    # min(50, sqrt(5.2e6 / N)) um p-p: 41.6 at 3000 rpm, 50 at 1500 rpm
    assert shaft.value(3000.0) == pytest.approx(math.sqrt(5.2e6 / 3000.0), rel=1e-9)
    assert shaft.value(1500.0) == pytest.approx(50.0)
    vel = next(x for x in p.limits if x.id == "housing-velocity-pump-test")
    assert vel.value(3000.0) == 3.0 and vel.scope.run_kinds == ("shop-test",)
    assert all(x.source.confidence == "from memory" for x in p.limits)
