"""CSV files as spreadsheets, scripts and recorders write them, through ``rundash import``.

Every file here is written by pandas or by Python's csv module (never by rundash). Each
either imports with the sample rate within 1e-6 relative of the rate it was written at
(the time stamps are ``i / fs`` printed to the stated precision), or is refused with one
line naming the file and row, exit 1, and no traceback.
"""

from __future__ import annotations

import csv
from datetime import datetime, timezone

import numpy as np
import pytest

from rundash.cli import main
from rundash.ingest import open_reader
from rundash.ingest.importer import import_run
from rundash.ingest.machine_file import parse_machine_description
from rundash.model import DataSpec
from rundash.storage import queries as q

MACHINE = """
[machine]
name = "Dialect rig"
kind = "fan"
rated_speed_rpm = 3000
min_operating_speed_rpm = 2800
max_continuous_speed_rpm = 3100

[tach]
column = "tach"

[[probes]]
name = "P1"
column = "x1"
kind = "proximity"
units = "um"

[data]
signal_units = "engineering"
{data}
"""

EPOCH0 = 1_777_615_200.0  # 2026-05-01T06:00:00Z


def columns(fs: float, seconds: float) -> dict[str, np.ndarray]:
    n = int(round(fs * seconds))
    i = np.arange(n)
    t = i / fs
    noise = np.random.default_rng(int(fs)).standard_normal(n)
    return {"tach": np.where(np.mod(t * 20.0, 1.0) < 0.2, 5.0, 0.0),
            "x1": 30.0 * np.sin(2 * np.pi * 20.0 * t) + 0.1 * noise, "i": i}


def desc(data: str = ""):
    return parse_machine_description(MACHINE.format(data=data), "m.toml")


def imported_rate(db, path, data: str = "") -> tuple[float, object]:
    res = import_run(db, path, desc(data))
    with db.read() as conn:
        stored = {c.sample_rate_hz for c in q.list_channels(conn, res.run_id)}
    assert stored == {res.sample_rate_hz}
    return res.sample_rate_hz, res


def pandas_csv(path, time_name, times, cols, *, float_format=None, time_format=None, **kw):
    import pandas as pd
    df = pd.DataFrame({time_name: times, "tach": cols["tach"], "x1": cols["x1"]})
    if time_format is not None:  # the time column printed its own way, the rest plainly
        df[time_name] = [time_format % v for v in times]
    df.to_csv(path, index=False, float_format=float_format, **kw)
    return path


class TestPrintedPrecision:
    """Time printed coarser than the sample interval's full digits still fits one rate."""

    @pytest.mark.parametrize("fmt, fs, seconds", [
        ("%.6g", 5120.0, 60.0),    # spreadsheet-style 6 significant digits
        ("%.8g", 5120.0, 120.0),   # the 2-minute file that failed at 7.6 s before
        ("%.8f", 10240.0, 30.0),   # 8 decimals at 10 240 Hz
        ("%.4f", 2000.0, 30.0),    # 0.1 ms resolution at 0.5 ms steps
    ])
    def test_imports_with_the_written_rate(self, db, tmp_path, fmt, fs, seconds):
        c = columns(fs, seconds)
        p = pandas_csv(tmp_path / "r.csv", "time_s", c["i"] / fs, c, time_format=fmt)
        rate, res = imported_rate(db, p)
        assert rate == pytest.approx(fs, rel=1e-6)
        assert res.n_samples == c["i"].size
        assert "time column 'time_s' in s (by its name)" in res.time_base

    def test_python_csv_module_repr_floats(self, db, tmp_path):
        # csv.writer prints floats with repr (shortest round-trip digits)
        fs = 25600.0
        c = columns(fs, 5.0)
        p = tmp_path / "r.csv"
        with open(p, "w", newline="") as fh:
            w = csv.writer(fh)
            w.writerow(["time", "tach", "x1"])
            w.writerows(zip(c["i"] / fs, c["tach"], c["x1"]))
        rate, _ = imported_rate(db, p)
        assert rate == pytest.approx(fs, rel=1e-6)


class TestUnits:
    def test_milliseconds_by_name(self, db, tmp_path):
        fs = 5120.0
        c = columns(fs, 20.0)
        p = pandas_csv(tmp_path / "r.csv", "Time [ms]", c["i"] * 1000.0 / fs, c,
                       float_format="%.6f")
        rate, res = imported_rate(db, p)
        assert rate == pytest.approx(fs, rel=1e-6)
        assert "in ms (by its name)" in res.time_base

    def test_milliseconds_by_step_size(self, db, tmp_path):
        # 1 kHz with time in whole milliseconds under a bare 'time' header: as seconds this
        # would be 1 Hz (what was stored before, without a word)
        fs = 1000.0
        c = columns(fs, 20.0)
        p = pandas_csv(tmp_path / "r.csv", "time", c["i"].astype(np.int64), c,
                       float_format="%.6g")
        rate, res = imported_rate(db, p)
        assert rate == pytest.approx(fs, rel=1e-6)
        assert "in ms (by its step size)" in res.time_base

    def test_microseconds_by_name(self, db, tmp_path):
        fs = 25600.0
        c = columns(fs, 4.0)
        p = pandas_csv(tmp_path / "r.csv", "time_us", c["i"] * 1e6 / fs, c,
                       float_format="%.3f")
        rate, res = imported_rate(db, p)
        assert rate == pytest.approx(fs, rel=1e-6)
        assert "in µs (by its name)" in res.time_base

    def test_unit_chosen_to_agree_with_a_declared_rate(self, db, tmp_path):
        fs = 5120.0
        c = columns(fs, 10.0)
        p = pandas_csv(tmp_path / "r.csv", "time", c["i"] * 1000.0 / fs, c,
                       float_format="%.7f")
        rate, res = imported_rate(db, p, "sample_rate_hz = 5120")
        assert rate == fs
        assert "in ms (by agreement with [data].sample_rate_hz)" in res.time_base


class TestEpoch:
    def test_epoch_seconds_with_microsecond_digits_set_the_start(self, db, tmp_path):
        fs = 5120.0
        c = columns(fs, 30.0)
        t = EPOCH0 + 0.25 + c["i"] / fs
        p = pandas_csv(tmp_path / "r.csv", "timestamp", t, c, time_format="%.6f")
        rate, res = imported_rate(db, p)
        assert rate == pytest.approx(fs, rel=1e-6)
        want = datetime(2026, 5, 1, 6, 0, 0, 250000, tzinfo=timezone.utc)
        assert abs((res.started_at - want).total_seconds()) < 2e-6
        with db.read() as conn:
            got = q.get_run(conn, res.run_id).started_at
        assert abs((got - want).total_seconds()) < 2e-6
        assert "epoch time stamps" in res.time_base

    def test_epoch_milliseconds_by_step(self, db, tmp_path):
        fs = 1000.0
        c = columns(fs, 20.0)
        t = (EPOCH0 * 1000 + c["i"]).astype(np.int64)
        p = pandas_csv(tmp_path / "r.csv", "timestamp", t, c, float_format="%.6g")
        rate, res = imported_rate(db, p)
        assert rate == pytest.approx(fs, rel=1e-6)
        assert res.started_at == datetime(2026, 5, 1, 6, 0, tzinfo=timezone.utc)

    def test_given_start_time_wins(self, db, tmp_path):
        fs = 1000.0
        c = columns(fs, 5.0)
        p = pandas_csv(tmp_path / "r.csv", "timestamp", EPOCH0 + c["i"] / fs, c,
                       time_format="%.3f")
        given = datetime(2020, 1, 1, tzinfo=timezone.utc)
        res = import_run(db, p, desc(), started_at=given)
        assert res.started_at == given


class TestDialects:
    def test_semicolon_and_decimal_comma(self, db, tmp_path):
        fs = 2560.0
        c = columns(fs, 20.0)
        p = pandas_csv(tmp_path / "r.csv", "Zeit [s]", c["i"] / fs, c, float_format="%.7f",
                       sep=";", decimal=",")
        rate, res = imported_rate(db, p)
        assert rate == pytest.approx(fs, rel=1e-6)
        with db.read() as conn:
            x1 = q.read_channel(conn, q.list_channels(conn, res.run_id)[1].id)
        np.testing.assert_allclose(x1, c["x1"], atol=1e-6)  # float32 of %.7f values

    def test_tab_separated_declared(self, db, tmp_path):
        fs = 1000.0
        c = columns(fs, 10.0)
        p = pandas_csv(tmp_path / "r.txt", "time_s", c["i"] / fs, c, float_format="%.6f",
                       sep="\t")
        rate, _ = imported_rate(db, p, 'delimiter = "\\t"')
        assert rate == pytest.approx(fs, rel=1e-6)

    def test_utf8_bom(self, db, tmp_path):
        fs = 1000.0
        c = columns(fs, 10.0)
        p = pandas_csv(tmp_path / "r.csv", "time_s", c["i"] / fs, c, float_format="%.6f",
                       encoding="utf-8-sig")
        assert p.read_bytes()[:3] == b"\xef\xbb\xbf"
        rate, _ = imported_rate(db, p)
        assert rate == pytest.approx(fs, rel=1e-6)

    def test_quoted_header(self, db, tmp_path):
        fs = 1000.0
        c = columns(fs, 10.0)
        p = tmp_path / "r.csv"
        with open(p, "w", newline="") as fh:
            w = csv.writer(fh, quoting=csv.QUOTE_NONNUMERIC)  # names quoted, numbers not
            w.writerow(["time_s", "tach", "x1"])
            w.writerows(zip(c["i"] / fs, c["tach"], c["x1"]))
        assert p.read_text().startswith('"time_s","tach","x1"')
        rate, _ = imported_rate(db, p)
        assert rate == pytest.approx(fs, rel=1e-6)

    def test_spaces_around_names(self, db, tmp_path, capsys):
        # a KeyError traceback before (issue: header with a space after a name)
        fs = 1000.0
        c = columns(fs, 10.0)
        p = tmp_path / "r.csv"
        with open(p, "w", newline="") as fh:
            w = csv.writer(fh)
            w.writerow(["time_s ", " tach", " x1 "])
            w.writerows(zip(c["i"] / fs, c["tach"], c["x1"]))
        mpath = tmp_path / "m.toml"
        mpath.write_text(MACHINE.format(data=""), encoding="utf-8")
        dbp = tmp_path / "cli.sqlite"
        assert main(["import", "--machine", str(mpath), "--db", str(dbp), "--quiet", "--",
                     str(p)]) == 0
        assert capsys.readouterr().err == ""
        rate, _ = imported_rate(db, p)
        assert rate == pytest.approx(fs, rel=1e-6)

    def test_thousand_unused_columns_with_junk(self, db, tmp_path):
        import pandas as pd
        fs = 1000.0
        c = columns(fs, 3.0)
        n = c["i"].size
        rng = np.random.default_rng(3)
        junk = {f"aux{k}": rng.choice(["n/a", "ERR", "", "1,5", "#"], n) for k in range(1000)}
        df = pd.DataFrame({"time_s": c["i"] / fs, **junk, "tach": c["tach"], "x1": c["x1"]})
        p = tmp_path / "wide.csv"
        df.to_csv(p, index=False, float_format="%.6f")
        rate, res = imported_rate(db, p)
        assert rate == pytest.approx(fs, rel=1e-6)
        assert res.n_samples == n
        (w,) = [w for w in res.warnings if "not stored" in w]
        assert "and 988 more" in w  # the list of unused channels stays one short line


class TestRefused:
    """One line, exit 1, naming file and row; nothing stored."""

    def run_cli(self, tmp_path, capsys, path, data=""):
        m = tmp_path / "m.toml"
        m.write_text(MACHINE.format(data=data), encoding="utf-8")
        dbp = tmp_path / "refused.sqlite"
        rc = main(["import", "--machine", str(m), "--db", str(dbp), "--quiet", "--", str(path)])
        err = capsys.readouterr().err
        assert rc == 1
        assert len(err.strip().splitlines()) == 1, err
        assert err.startswith(f"rundash import: error: {path.name}: ")
        return err

    def test_one_missing_row_names_the_row(self, tmp_path, capsys):
        fs = 5120.0
        c = columns(fs, 20.0)
        keep = np.ones(c["i"].size, bool)
        keep[70001] = False  # in the second block: after the first fit; the sample after
        # the gap sits in file row 70003 (header row 1, sample 0 in row 2)
        cc = {k: v[keep] for k, v in c.items()}
        p = pandas_csv(tmp_path / "gap.csv", "time_s", cc["i"] / fs, cc, time_format="%.8g")
        err = self.run_cli(tmp_path, capsys, p)
        assert "time column 'time_s', row 70003" in err and "evenly spaced" in err

    def test_drifting_clock_names_the_row(self, tmp_path, capsys):
        # the step grows by 0.2 % half-way: every step is near the interval, the grid is not
        # (1024 Hz: the time stamps use all 7 printed decimals)
        fs = 1024.0
        c = columns(fs, 200.0)
        dt = np.where(c["i"] < 100_000, 1.0, 1.002) / fs
        t = np.concatenate(([0.0], np.cumsum(dt[:-1])))
        p = pandas_csv(tmp_path / "drift.csv", "time_s", t, c, time_format="%.7f")
        err = self.run_cli(tmp_path, capsys, p)
        assert "time column 'time_s', row 1" in err and "off the sampling grid" in err
        row = int(err.split(", row ")[1].split(":")[0])
        assert 100_002 <= row <= 100_100

    def test_declared_rate_governs_and_the_time_column_is_checked(self, tmp_path, capsys,
                                                                 db):
        fs = 1000.0
        c = columns(fs, 60.0)
        p = pandas_csv(tmp_path / "r.csv", "time_s", c["i"] / fs, c, float_format="%.6f")
        rate, res = imported_rate(db, p, "sample_rate_hz = 1000")
        assert rate == 1000.0 and "from [data].sample_rate_hz" in res.time_base
        # 0.05 % off: within the 0.1 % agreement, but after ~1 s the grid leaves the column
        err = self.run_cli(tmp_path, capsys, p, "sample_rate_hz = 1000.5")
        assert "off the sampling grid" in err and "[data].sample_rate_hz" in err

    def test_text_in_a_used_column_names_cell(self, tmp_path, capsys):
        fs = 1000.0
        c = columns(fs, 100.0)
        p = pandas_csv(tmp_path / "text.csv", "time_s", c["i"] / fs, c, float_format="%.6f")
        lines = p.read_text().splitlines()
        lines[81234] = lines[81234].rsplit(",", 1)[0] + ",1.2.3"
        p.write_text("\n".join(lines) + "\n")
        err = self.run_cli(tmp_path, capsys, p)
        assert "column 'x1', row 81235: '1.2.3' is not a number" in err

    def test_decimal_comma_in_a_comma_file_names_the_row(self, tmp_path, capsys):
        fs = 1000.0
        c = columns(fs, 100.0)
        p = pandas_csv(tmp_path / "dc.csv", "time_s", c["i"] / fs, c, float_format="%.6f")
        lines = p.read_text().splitlines()
        lines[90000] = lines[90000].replace(".", ",", 1)
        p.write_text("\n".join(lines) + "\n")
        err = self.run_cli(tmp_path, capsys, p)
        assert "row 90001 has 4 columns; expected 3 columns" in err

    def test_decimal_comma_with_comma_delimiter_is_refused_in_the_machine_file(
            self, tmp_path, capsys):
        p = tmp_path / "x.csv"
        p.write_text("time_s,tach,x1\n0,0,0\n")
        m = tmp_path / "m.toml"
        m.write_text(MACHINE.format(data='delimiter = ","\ndecimal = ","'), encoding="utf-8")
        assert main(["import", "--machine", str(m), "--db", str(tmp_path / "d.sqlite"),
                     "--quiet", "--", str(p)]) == 1
        err = capsys.readouterr().err
        assert "[data].decimal" in err and len(err.strip().splitlines()) == 1


class TestReaderTimeBase:
    def test_rate_is_refined_over_the_file(self, tmp_path):
        # whole milliseconds at 5120 Hz: each time stamp is off by up to 2.5 samples, so the
        # first block alone fixes the rate only to ~1e-7; the whole file does better
        fs = 5120.0
        c = columns(fs, 60.0)
        p = pandas_csv(tmp_path / "r.csv", "time_ms", np.round(c["i"] * 1000.0 / fs), c,
                       float_format="%.6g")
        with open_reader(p, DataSpec(signal_units="engineering")) as r:
            r.select(["tach", "x1"])
            assert r.sample_rate_hz == pytest.approx(fs, rel=1e-6)
            n = sum(b.shape[1] for b, _ in r.blocks())
            assert n == c["i"].size
            assert r.sample_rate_hz == pytest.approx(fs, rel=1e-8)
            assert any("coarser than its sample interval" in w for w in r.warnings)


class TestPieces:
    """The reader parses a file in pieces cut at line ends, several on threads at once;
    what it returns and the rows its messages name must not depend on where the cuts
    fall. Checked against numpy's own text reader (``np.loadtxt``) of the same file."""

    @pytest.fixture
    def small_pieces(self, monkeypatch):
        import rundash.ingest.csv_reader as cr
        monkeypatch.setattr(cr, "PIECE_FIELDS", 600)  # about 250 rows a piece here
        monkeypatch.setattr(cr, "PIECE_BYTES", 1 << 12)
        monkeypatch.setattr(cr, "MIN_PIECE_BYTES", 1 << 10)

    def test_values_match_a_whole_read(self, tmp_path, small_pieces):
        fs = 1000.0
        c = columns(fs, 20.0)
        p = pandas_csv(tmp_path / "r.csv", "time_s", c["i"] / fs, c, float_format="%.6f")
        text = p.read_text().splitlines()
        for k in (777, 3001, 15000):  # blank lines, which the reader skips as pandas does
            text.insert(k, "")
        p.write_text("\n".join(text))  # no line end after the last row
        want = np.loadtxt(p, delimiter=",", skiprows=1)
        with open_reader(p, DataSpec(signal_units="engineering")) as r:
            assert r._piece_bytes <= 1 << 12
            r.select(["tach", "x1"])
            got = np.concatenate([b.copy() for b, _ in r.blocks(4096)], axis=1)
        np.testing.assert_array_equal(got, want[:, 1:].T)  # bit for bit: the same parse

    @pytest.mark.parametrize("bad_row", [2, 257, 9876, 19500])
    def test_a_bad_cell_is_named_by_its_row_in_any_piece(self, tmp_path, capsys, bad_row,
                                                         small_pieces):
        fs = 1000.0
        c = columns(fs, 20.0)
        p = pandas_csv(tmp_path / "r.csv", "time_s", c["i"] / fs, c, float_format="%.6f")
        lines = p.read_text().splitlines()  # lines[k] is row k + 1 (the header is row 1)
        lines[bad_row - 1] = lines[bad_row - 1].rsplit(",", 1)[0] + ",1.2.3"
        long_row = min(bad_row + 500, len(lines)) - 1
        lines[long_row] += ",1"  # a later long row: the first problem is the one named
        p.write_text("\n".join(lines) + "\n")
        err = TestRefused.run_cli(None, tmp_path, capsys, p)
        assert f"column 'x1', row {bad_row}: '1.2.3' is not a number" in err
