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


class TestMountingAngleText:
    """Mounting angles in the trade's form: degrees left or right of top dead centre viewed
    from the driver end (common practice, no source); the numeric form stays."""

    @staticmethod
    def _parse(tach: str | None, x: str, y: str, rotation: str = "ccw"):
        text = _edit("angle_deg = 45.0", f"angle_deg = {x}")
        text = text.replace("angle_deg = 135.0", f"angle_deg = {y}", 1)
        text = text.replace('rotation = "ccw"', f'rotation = "{rotation}"', 1)
        if tach is not None:
            text = text.replace("[tach]\n", f"[tach]\nangle_deg = {tach}\n", 1)
        return parse_machine_description(text, "m.toml")

    def test_left_and_right_of_top_dead_centre(self):
        # ccw viewed from the driver end: the shaft turns from the top towards the left,
        # so 45° L is 45° in the direction of rotation and 45° R is 315°
        d = self._parse(None, '"45° L"', '"45° R"')
        assert d.probe("NDE-X").angle_deg == 45.0 and d.probe("NDE-Y").angle_deg == 315.0
        d = self._parse(None, '"45° L"', '"45° R"', rotation="cw")
        assert d.probe("NDE-X").angle_deg == 315.0 and d.probe("NDE-Y").angle_deg == 45.0

    @pytest.mark.parametrize("text, deg", [('"45°L"', 45.0), ('"45 deg L"', 45.0),
                                           ('"30 left"', 30.0), ('"60° r"', 300.0),
                                           ('"0°"', 0.0), ('"180°"', 180.0), ('"22.5° L"', 22.5)])
    def test_spellings(self, text, deg):
        assert self._parse(None, text, "135.0").probe("NDE-X").angle_deg == deg

    def test_numbers_unchanged(self):
        d = self._parse(None, "45.0", "135.0")
        assert d.probe("NDE-X").angle_deg == 45.0 and d.probe("NDE-Y").angle_deg == 135.0
        assert d.tach.angle_deg == 0.0

    def test_probe_angle_counted_from_the_once_per_rev_sensor(self):
        # sensor at 90° L (90° from the top in the direction of rotation, ccw): a probe at
        # 45° R of the top is 360 - 45 - 90 = 225° from the sensor
        d = self._parse('"90° L"', '"45° R"', '"45° L"')
        assert d.tach.angle_deg == 90.0
        assert d.probe("NDE-X").angle_deg == 225.0 and d.probe("NDE-Y").angle_deg == 315.0

    @pytest.mark.parametrize("text, match", [
        ('"45"', r"'NDE-X'\.angle_deg: .*say L or R"),
        ('"200° L"', r"'NDE-X'\.angle_deg: .*at most 180° to either side"),
        ('"north"', r"'NDE-X'\.angle_deg: expected a number, or degrees left or right of top dead centre .*"
                    r"got 'north'"),
    ])
    def test_bad_text_names_the_key(self, text, match):
        with pytest.raises(ConfigError, match=r"m\.toml: \[\[probes\]\] " + match):
            self._parse(None, text, "135.0")

    def test_bad_tach_text(self):
        with pytest.raises(ConfigError, match=r"m\.toml: \[tach\]\.angle_deg: expected"):
            self._parse('"up"', "45.0", "135.0")


def test_shown_in_the_trade_form():
    from rundash.conventions import angle_from_top, side_of_top

    for rot in ("ccw", "cw"):
        for deg in (10.0, 45.0, 90.0, 179.0):
            for side in "LR":
                assert side_of_top(angle_from_top(deg, side, rot), rot) == f"{deg:g}° {side}"
    assert side_of_top(0.0, "cw") == "0° (top)" and side_of_top(360.0, "ccw") == "0° (top)"
    assert side_of_top(180.0, "ccw") == "180° (bottom)"


class TestSiteLevels:
    LEVEL = '\n[[levels]]\nbearing = "NDE"\nalert = 75.0\ntrip = 110.0\nsource = "OEM manual 7-2"\n'

    def test_a_bearing_names_its_proximity_and_velocity_probes(self):
        d = parse_machine_description(EXAMPLE_MACHINE + self.LEVEL, "m.toml")
        assert [(x.probe, x.measure, x.alert, x.trip, x.source) for x in d.levels] == [
            (n, "direct", 75.0, 110.0, "OEM manual 7-2") for n in ("NDE-X", "NDE-Y", "NDE-V")]

    @pytest.mark.parametrize("table, match", [
        ('probe = "NDE-X"\nbearing = "NDE"\nalert = 1.0\nsource = "s"',
         r"\[\[levels\]\] #1: name either probe"),
        ('probe = "NOPE"\nalert = 1.0\nsource = "s"', r"#1\.probe: names no probe: 'NOPE'"),
        ('probe = "NDE-X"\nsource = "s"', r"give alert = \.\.\. or trip"),
        ('probe = "NDE-X"\nalert = 5.0\ntrip = 4.0\nsource = "s"',
         r"#1\.trip: expected a level above alert"),
        ('probe = "NDE-X"\nalert = 5.0', r"#1\.source: missing required key"),
        ('probe = "NDE-X"\nalert = 5.0\nsource = " "', r"#1\.source: expected the document"),
        ('probe = "NDE-X"\nalert = 5.0\nmeasure = "rms"\nsource = "s"', r"#1\.measure"),
        ('probe = "NDE-X"\nalarm = 5.0\nsource = "s"', r"#1\.alarm: unknown key"),
    ])
    def test_bad_levels_name_the_key(self, table, match):
        with pytest.raises(ConfigError, match=match):
            parse_machine_description(EXAMPLE_MACHINE + "\n[[levels]]\n" + table + "\n",
                                      "m.toml")

    def test_one_probe_one_measure_once(self):
        text = EXAMPLE_MACHINE + self.LEVEL + '\n[[levels]]\nprobe = "NDE-X"\nalert = 1.0\nsource = "s"\n'
        with pytest.raises(ConfigError, match="'NDE-X' already has direct levels"):
            parse_machine_description(text, "m.toml")
