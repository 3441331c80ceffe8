"""ASAM MDF4 files written by asammdf (never by rundash) through the importer and the CLI.

Expected values follow from what the test writes: a linear conversion rule
``phys = a * raw + b`` (ASAM MDF 4.1, conversion type 1, "linear") applied to int16 raw
values, channels split over channel groups with their own time channels, units as the
file states them.
"""

from __future__ import annotations

from datetime import datetime, timezone

import numpy as np
import pytest
from numpy.testing import assert_allclose

from rundash.cli import main
from rundash.ingest.importer import import_run
from rundash.ingest.machine_file import parse_machine_description
from rundash.storage import queries as q

asammdf = pytest.importorskip("asammdf")  # in the test extra: never skipped there
from asammdf import MDF, Signal  # noqa: E402

FS = 2000.0
N = 40_000
START = datetime(2026, 5, 1, 6, 0, tzinfo=timezone.utc)

MACHINE = """
[machine]
name = "MDF rig"
kind = "compressor"
rated_speed_rpm = 3000
min_operating_speed_rpm = 2800
max_continuous_speed_rpm = 3100

[tach]
column = "tach"

[[probes]]
name = "X"
column = "x1"
kind = "proximity"
units = "um"

[[probes]]
name = "V"
column = "v1"
kind = "velocity"
units = "mm/s"

[data]
signal_units = "engineering"
{data}
"""


def desc(data=""):
    return parse_machine_description(MACHINE.format(data=data), "m.toml")


def signals(n=N, fs=FS, t0=0.0):
    t = t0 + np.arange(n) / fs
    return t, {"tach": np.where(np.mod(t * 25.0, 1.0) < 0.2, 5.0, 0.0),
               "x1": 40.0 * np.sin(2 * np.pi * 25.0 * t),
               "v1": 3.0 * np.cos(2 * np.pi * 25.0 * t)}


def write(path, groups, *, start=START):
    """``groups``: list of lists of Signal; one channel group each."""
    mdf = MDF(version="4.10")
    mdf.header.start_time = start
    for sigs in groups:
        mdf.append(sigs)
    mdf.save(path, overwrite=True)
    mdf.close()
    return path


def x1_signal(t, x):
    # int16 raw counts with a linear rule: phys = 0.002 * raw - 1.5 (um)
    raw = np.round((x + 1.5) / 0.002).astype(np.int16)
    return Signal(samples=raw, timestamps=t, name="x1", unit="µm",
                  conversion={"a": 0.002, "b": -1.5}), 0.002 * raw.astype(np.float64) - 1.5


def stored(db, run_id):
    with db.read() as conn:
        chans = q.list_channels(conn, run_id)
        return chans, {c.name: q.read_channel(conn, c.id) for c in chans}


class TestImport:
    def test_groups_conversion_units_and_rate(self, db, tmp_path):
        t, c = signals()
        sx, x_phys = x1_signal(t, c["x1"])
        path = write(tmp_path / "run.mf4", [
            [Signal(c["tach"].astype(np.float32), t, name="tach", unit="V"), sx],
            [Signal(c["v1"], t, name="v1", unit="mm/s"),
             Signal(np.zeros(N), t, name="spare", unit="bar")],
        ])
        res = import_run(db, path, desc())
        assert res.sample_rate_hz == FS
        assert res.n_samples == N
        assert res.started_at == START
        assert "2 channel groups share the rate" in res.time_base
        chans, data = stored(db, res.run_id)
        assert [ch.unit for ch in chans] == ["raw", "um", "mm/s"]  # tach: file units
        assert {ch.sample_rate_hz for ch in chans} == {FS}
        assert_allclose(data["x1"], x_phys, rtol=1e-6, atol=1e-5)  # float32 storage
        assert_allclose(data["v1"], c["v1"], rtol=1e-6, atol=1e-6)
        assert_allclose(data["tach"], c["tach"])
        assert any("spare" in w for w in res.warnings)

    def test_groups_offset_by_whole_samples_are_aligned(self, db, tmp_path):
        t, c = signals()
        t2 = t + 10 / FS  # the second group starts ten samples later
        path = write(tmp_path / "shift.mf4", [
            [Signal(c["tach"], t, name="tach"), Signal(c["x1"], t, name="x1")],
            [Signal(3.0 * np.cos(2 * np.pi * 25.0 * t2), t2, name="v1")],
        ])
        res = import_run(db, path, desc())
        assert res.n_samples == N - 10
        _, data = stored(db, res.run_id)
        assert_allclose(data["x1"], c["x1"][10:], atol=1e-5)
        assert_allclose(data["v1"], 3.0 * np.cos(2 * np.pi * 25.0 * t[10:]), atol=1e-6)
        assert "group 1 by -10 samples" in res.time_base

    def test_sub_sample_offset_is_interpolated(self, db, tmp_path):
        t, c = signals()
        t2 = t + 0.4 / FS
        path = write(tmp_path / "frac.mf4", [
            [Signal(c["tach"], t, name="tach"), Signal(c["x1"], t, name="x1")],
            [Signal(3.0 * np.cos(2 * np.pi * 25.0 * t2), t2, name="v1")],
        ])
        res = import_run(db, path, desc())
        _, data = stored(db, res.run_id)
        # linear interpolation error |f - p1| <= h^2/8 max|f''| (R. L. Burden, J. D. Faires,
        # Numerical Analysis, 9th ed., Thm 3.3): A (2 pi f h)^2 / 8 = 3 (pi/40)^2 / 8
        # = 2.31e-3 mm/s for a 3 mm/s, 25 Hz cosine at h = 0.5 ms
        want = 3.0 * np.cos(2 * np.pi * 25.0 * t[1:1 + data["v1"].size])
        bound = 3.0 * (2 * np.pi * 25.0 / FS) ** 2 / 8
        assert_allclose(data["v1"], want, atol=bound * 1.01 + 1e-6)  # + float32 storage
        assert np.abs(data["v1"] - want).max() > 0.5 * bound  # interpolated, not shifted
        assert "(interpolated)" in res.time_base

    def test_millivolts_scale_to_volts(self, db, tmp_path):
        t, c = signals()
        path = write(tmp_path / "mv.mf4", [[
            Signal(c["tach"], t, name="tach", unit="V"),
            Signal(c["x1"] * 7.874, t, name="x1", unit="mV"),  # 7.874 mV/um
            Signal(c["v1"] * 4.0, t, name="v1", unit="mV")]])  # 4 mV/(mm/s)
        d = parse_machine_description(
            MACHINE.format(data="").replace('signal_units = "engineering"', 'signal_units = "V"')
            .replace('units = "um"', 'units = "um"\nsensitivity_mv_per_unit = 7.874')
            .replace('units = "mm/s"', 'units = "mm/s"\nsensitivity_mv_per_unit = 4.0'), "m")
        res = import_run(db, path, d)
        _, data = stored(db, res.run_id)
        assert_allclose(data["x1"], c["x1"], rtol=1e-5, atol=1e-4)
        assert_allclose(data["v1"], c["v1"], rtol=1e-5, atol=1e-5)


class TestRefused:
    def cli(self, tmp_path, capsys, path, data=""):
        m = tmp_path / "m.toml"
        m.write_text(MACHINE.format(data=data), encoding="utf-8")
        rc = main(["import", "--machine", str(m), "--db", str(tmp_path / "r.sqlite"),
                   "--quiet", "--", str(path)])
        err = capsys.readouterr().err
        assert rc == 1
        assert len(err.strip().splitlines()) == 1, err
        assert err.startswith(f"rundash import: error: {path.name}: ")
        return err

    def test_groups_at_different_rates(self, tmp_path, capsys):
        t, c = signals()
        t2, c2 = signals(n=N // 2, fs=FS / 2)
        path = write(tmp_path / "rates.mf4", [
            [Signal(c["tach"], t, name="tach"), Signal(c["x1"], t, name="x1")],
            [Signal(c2["v1"], t2, name="v1")]])
        err = self.cli(tmp_path, capsys, path)
        assert "'v1' (group 1) is sampled at 1000 Hz" in err and "2000 Hz" in err
        assert "does not resample" in err

    def test_a_name_in_two_groups(self, tmp_path, capsys):
        t, c = signals()
        path = write(tmp_path / "twice.mf4", [
            [Signal(c["tach"], t, name="tach"), Signal(c["x1"], t, name="x1")],
            [Signal(c["v1"], t, name="v1"), Signal(c["x1"], t, name="x1")]])
        err = self.cli(tmp_path, capsys, path)
        assert "channel 'x1' is in channel groups 0 and 1" in err

    def test_unit_disagrees_with_the_machine_file(self, tmp_path, capsys):
        t, c = signals()
        path = write(tmp_path / "unit.mf4", [[
            Signal(c["tach"], t, name="tach"), Signal(c["x1"] / 1000, t, name="x1", unit="mm"),
            Signal(c["v1"], t, name="v1", unit="mm/s")]])
        err = self.cli(tmp_path, capsys, path)
        assert "channel 'x1' is in 'mm' by the file" in err and "units = 'um'" in err

    def test_text_channel(self, tmp_path, capsys):
        t, c = signals()
        state = Signal(np.arange(N, dtype=np.uint8) % 2, t, name="v1",
                       conversion={"val_0": 0, "text_0": b"off", "val_1": 1, "text_1": b"on"})
        path = write(tmp_path / "text.mf4", [[
            Signal(c["tach"], t, name="tach"), Signal(c["x1"], t, name="x1"), state]])
        err = self.cli(tmp_path, capsys, path)
        assert "channel 'v1' holds" in err and "expected numbers" in err

    def test_gap_in_a_time_channel(self, tmp_path, capsys):
        t, c = signals()
        keep = np.ones(N, bool)
        keep[30_000] = False
        path = write(tmp_path / "gap.mf4", [[
            Signal(c[k][keep], t[keep], name=k) for k in ("tach", "x1", "v1")]])
        err = self.cli(tmp_path, capsys, path)
        assert "time channel" in err and "row 30000" in err and "evenly spaced" in err

    @pytest.mark.parametrize("damage", ["truncated", "garbage", "zeroed_blocks"])
    def test_broken_file(self, tmp_path, capsys, damage):
        t, c = signals()
        good = write(tmp_path / "good.mf4", [[Signal(c[k], t, name=k)
                                              for k in ("tach", "x1", "v1")]])
        data = bytearray(good.read_bytes())
        if damage == "truncated":
            data = data[: len(data) // 3]
        elif damage == "garbage":
            data = bytearray(np.random.default_rng(2).integers(0, 256, 5000, np.uint8))
        else:  # a valid identification block, then zeros where the blocks were
            data[64:] = bytes(len(data) - 64)
        bad = tmp_path / f"{damage}.mf4"
        bad.write_bytes(bytes(data))
        err = self.cli(tmp_path, capsys, bad)
        assert "MDF" in err or "channel" in err or "records" in err
