import pytest

from rundash.errors import ConfigError
from rundash.ingest.machine_file import load_machine_description, parse_machine_description
from tests.conftest import EXAMPLE_MACHINE


def _edit(old: str, new: str) -> str:
    assert old in EXAMPLE_MACHINE
    return EXAMPLE_MACHINE.replace(old, new, 1)


class TestParseMachineDescription:
    def test_example_parses_fully(self):
        d = parse_machine_description(EXAMPLE_MACHINE, "m.toml")
        assert d.machine.name == "Test rig T-1"
        assert d.machine.max_continuous_speed_rpm == 6300.0
        assert d.tach.column == "tach" and d.tach.pulses_per_rev == 1
        assert [p.name for p in d.probes] == ["NDE-X", "NDE-Y", "NDE-V"]
        assert d.probe("NDE-X").pair == "NDE-Y"
        assert d.probe("NDE-V").kind == "velocity"

    @pytest.mark.parametrize("text, match", [
        (_edit('rotation = "ccw"', 'rotation = "ccw"\nspeed = 3'),
         r"\[machine\]\.speed: unknown key"),
        (_edit('kind = "compressor"\n', ''), r"\[machine\]\.kind: missing required key"),
        (_edit("min_operating_speed_rpm = 5000", "min_operating_speed_rpm = 7000"),
         r"\[machine\]\.min_operating_speed_rpm: minimum operating speed 7000 rpm is above"),
        (_edit("sensitivity_mv_per_unit = 7.874\nangle_deg = 45.0",
               "sensitivity_mv_per_unit = -7.874\nangle_deg = 45.0"),
         r"\[\[probes\]\] 'NDE-X'\.sensitivity_mv_per_unit: expected a positive value"),
        (_edit('units = "mm/s"', 'units = "furlong"'),
         r"\[\[probes\]\] 'NDE-V'\.units: Invalid value for 'units'"),
        (_edit('units = "mm/s"', 'units = "um"'),
         r"\[\[probes\]\] 'NDE-V'\.units: unit 'um' does not fit a velocity transducer"),
        (_edit('kind = "compressor"', 'kind = "blender"'),
         r"\[machine\]\.kind: Invalid value for 'kind'"),
        (_edit('edge = "rising"', 'edge = "up"'), r"\[tach\]\.edge: Invalid value for 'edge'"),
        (_edit("pulses_per_rev = 1", "pulses_per_rev = 0"), r"\[tach\]\.pulses_per_rev"),
        (_edit('pair = "NDE-Y"', 'pair = "DE-Y"'), r"'NDE-X'\.pair: names no probe"),
        (_edit('column = "y1"', 'column = "x1"'), r"'NDE-Y'\.column: column 'x1' is already used"),
        (_edit("rated_speed_rpm = 6000", 'rated_speed_rpm = "fast"'),
         r"\[machine\]\.rated_speed_rpm: expected a number"),
        (_edit("trip_speed_rpm = 6900", "trip_speed_rpm = 6000"),
         r"\[machine\]\.trip_speed_rpm: trip speed 6000 rpm is below"),
        (EXAMPLE_MACHINE + "\n[extra]\nx = 1\n", r"extra: unknown table"),
        (EXAMPLE_MACHINE.split("[tach]")[0], r"\[tach\]: missing required table"),
        ("[machine\nname=", r"not valid TOML"),
    ])
    def test_bad_description_names_the_key(self, text, match):
        with pytest.raises(ConfigError, match=match):
            parse_machine_description(text, "m.toml")

    def test_error_names_the_file(self, tmp_path):
        p = tmp_path / "pump.toml"
        p.write_text(_edit('kind = "compressor"\n', ''), encoding="utf-8")
        with pytest.raises(ConfigError, match=r"^pump.toml: \[machine\]\.kind"):
            load_machine_description(p)

    def test_volts_need_sensitivity(self):
        text = _edit("sensitivity_mv_per_unit = 4.0\n", "")
        with pytest.raises(ConfigError, match="'NDE-V'.sensitivity_mv_per_unit: missing"):
            parse_machine_description(text, "m.toml")


class TestProcessingTable:
    """[processing] slow_roll_rpm: the user's slow-roll band overrides the automatic one."""

    BASE = """
[machine]
name = "M"
kind = "pump"
rated_speed_rpm = 3000
min_operating_speed_rpm = 2800
max_continuous_speed_rpm = 3100

[tach]
column = "t"

[[probes]]
name = "P"
column = "x"
kind = "proximity"
units = "um"
sensitivity_mv_per_unit = 7.874
"""

    def test_band_is_read(self):
        d = parse_machine_description(self.BASE + "\n[processing]\nslow_roll_rpm = [180, 260.5]\n")
        assert d.processing.slow_roll_rpm == (180.0, 260.5)
        assert parse_machine_description(self.BASE).processing.slow_roll_rpm is None

    @pytest.mark.parametrize("value, match", [
        ("[300]", r"expected two numbers \[low, high\] in rpm"),
        ('["a", 2]', r"expected two numbers"),
        ("[400, 300]", r"expected 0 <= low < high in rpm, got \[400, 300\]"),
        ("[-5, 300]", r"expected 0 <= low < high"),
        ("[200, 3200]", r"expected a band below the maximum continuous speed 3100 rpm"),
    ])
    def test_bad_band_names_the_key(self, value, match):
        with pytest.raises(ConfigError, match=r"^m\.toml: \[processing\]\.slow_roll_rpm: " + match):
            parse_machine_description(self.BASE + f"\n[processing]\nslow_roll_rpm = {value}\n",
                                      "m.toml")

    def test_tracker_is_read_and_checked(self):
        d = parse_machine_description(self.BASE + '\n[processing]\ntracker = "vold-kalman"\n')
        assert d.processing.tracker == "vold-kalman"
        assert parse_machine_description(self.BASE).processing.tracker is None
        with pytest.raises(ConfigError, match=r"^m\.toml: \[processing\]\.tracker: expected one "
                                              r"of 'order', 'vold-kalman', got 'kalman'"):
            parse_machine_description(self.BASE + '\n[processing]\ntracker = "kalman"\n', "m.toml")

    def test_unknown_key(self):
        with pytest.raises(ConfigError, match=r"\[processing\]\.slowroll: unknown key"):
            parse_machine_description(self.BASE + "\n[processing]\nslowroll = [1, 2]\n")
