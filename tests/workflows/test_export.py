"""`rundash export` and `rundash compare --format` on the demo database: the files read
back by independent libraries (pandas' CSV parser, openpyxl, pyarrow) hold the stored
results exactly, and the tables that carry verdicts carry the caution.

Ground truth for the one physical check: sample_runs/scenario.json, written by
sample_runs/generate.py (which does not import rundash).
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from rundash import CAUTION
from rundash.cli import main
from rundash.errors import InputError
from rundash.storage import queries as q
from rundash.storage.engine import open_database
from rundash.workflows import export as ex
from rundash.workflows.demo import build_demo, sample_runs_dir

SCENARIO = json.loads((sample_runs_dir() / "scenario.json").read_text())


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    folder = tmp_path_factory.mktemp("export")
    path = folder / "demo.sqlite"
    db = open_database(str(path), create=True)
    ids = build_demo(db)
    with db.read() as conn:
        by_file = {q.get_run(conn, i).source_name: i for i in ids}
    yield db, path, by_file, folder
    db.dispose()


def _export(path, run, what, out, *extra):
    assert main(["export", str(run), "--db", str(path), "--what", what, "-o", str(out),
                 *extra]) == 0
    return out


def _stored(db, run):
    with db.read() as conn:
        return q.load_tracks(conn, run)


class TestVectors:
    def test_csv_read_back_equals_the_stored_vectors(self, demo, tmp_path):
        db, path, by_file, _ = demo
        run = by_file["k410_2023_up.wav"]
        df = pd.read_csv(_export(path, run, "vectors", tmp_path / "v.csv"))
        assert list(df.columns) == list(ex.VECTOR_COLUMNS)
        tracks = _stored(db, run)
        assert len(df) == sum(len(t.time_s) for t in tracks)
        for t in tracks:
            sel = df[(df.probe == t.probe_name) & (df.order == t.order)
                     & (df.compensated == t.compensated)].sort_values("revolution")
            assert len(sel) == len(t.time_s)
            # times and speeds are stored as float64, the vectors as float32: the CSV's
            # full-precision numbers give both back exactly (to the last bit)
            for col in ("time_s", "speed_rpm", "amplitude", "phase_lag_deg", "direct"):
                np.testing.assert_array_equal(sel[col].to_numpy(), getattr(t, col), err_msg=col)
            assert set(sel.kind) == {t.kind}
            unit = {"proximity": "um", "velocity": "mm/s", "acceleration": "m/s2"}[t.kind]
            assert set(sel.amplitude_unit) == {unit} == set(sel.direct_unit)
            assert set(sel.amplitude_convention) == {"pp" if t.kind == "proximity" else "pk"}
            assert set(sel.direct_convention) == {"pp" if t.kind == "proximity" else "rms"}
        assert set(df.direction) <= {"run-up", "coast-down", "steady", "mixed"}
        assert df.phase_lag_deg.between(0, 360, inclusive="left").all()

    def test_the_exported_1x_peaks_where_the_scenario_puts_it(self, demo, tmp_path):
        # scenario.json (the generator's model): DE-X's first critical at 3476.3 rpm,
        # 51.128 um pp; within 0.5 % in speed (the tolerance of tests/test_demo_findings.py:
        # the 140 rpm/s sweep moves the apparent peak 0.2-0.5 %, F. M. Lewis 1932) and 1 %
        # in amplitude (the per-revolution value at one block, not a fitted peak)
        db, path, by_file, _ = demo
        df = pd.read_csv(_export(path, by_file["k410_2023_up.wav"], "vectors",
                                 tmp_path / "v1.csv", "--orders", "1", "--probe", "K410-DE-X"))
        assert set(df.order) == {1.0} and set(df.probe) == {"K410-DE-X"}
        up = df[(df.direction == "run-up") & df.compensated]
        peak = up.loc[up.amplitude.idxmax()]
        truth = SCENARIO["runs"]["2023_up"]["probes"]["K410-DE-X"]["peaks"][0]
        assert peak.speed_rpm == pytest.approx(truth["peak_rpm"], rel=0.005)
        assert peak.amplitude == pytest.approx(truth["peak_amplitude"], rel=0.01)

    def test_coast_down_rows_say_so(self, demo, tmp_path):
        db, path, by_file, _ = demo
        df = pd.read_csv(_export(path, by_file["k410_2023_down.wav"], "vectors",
                                 tmp_path / "d.csv", "--orders", "1"))
        down = df[df.direction == "coast-down"]
        assert len(down) > 0.5 * len(df)
        # falling speed along a coast-down (common practice, no source: it is what the word means)
        first = down[(down.probe == "K410-DE-X") & ~down.compensated].sort_values("time_s")
        assert first.speed_rpm.iloc[0] > first.speed_rpm.iloc[-1]

    def test_xlsx_opens_with_openpyxl(self, demo, tmp_path):
        import openpyxl

        db, path, by_file, _ = demo
        run = by_file["k410_2023_up.wav"]
        out = _export(path, run, "vectors", tmp_path / "v.xlsx", "--orders", "1,2",
                      "--probe", "K410-DE-Y")
        wb = openpyxl.load_workbook(out, read_only=True)
        ws = wb["vectors"]
        rows = list(ws.iter_rows(values_only=True))
        assert list(rows[0]) == list(ex.VECTOR_COLUMNS)
        stored = [t for t in _stored(db, run) if t.probe_name == "K410-DE-Y" and t.order in (1, 2)]
        assert len(rows) - 1 == sum(len(t.time_s) for t in stored)
        col = {c: i for i, c in enumerate(rows[0])}
        t = stored[0]
        got = [r for r in rows[1:] if r[col["order"]] == t.order
               and r[col["compensated"]] == t.compensated]
        # a spreadsheet number keeps 15 significant digits (Microsoft, "Excel specifications
        # and limits": number precision 15 digits; openpyxl writes that many): rtol 1e-14
        np.testing.assert_allclose([r[col["amplitude"]] for r in got], t.amplitude, rtol=1e-14)
        np.testing.assert_allclose([r[col["speed_rpm"]] for r in got], t.speed_rpm, rtol=1e-14)

    def test_parquet_opens_with_pyarrow(self, demo, tmp_path):
        import pyarrow.parquet as pq

        db, path, by_file, _ = demo
        run = by_file["k410_2025_up.wav"]
        table = pq.read_table(_export(path, run, "vectors", tmp_path / "v.parquet"))
        assert table.column_names == list(ex.VECTOR_COLUMNS)
        df = table.to_pandas()
        for t in _stored(db, run)[:4]:
            sel = df[(df.probe == t.probe_name) & (df.order == t.order)
                     & (df.compensated == t.compensated)]
            np.testing.assert_array_equal(sel.phase_lag_deg.to_numpy(), t.phase_lag_deg)


class TestOtherTables:
    def test_speed_profile(self, demo, tmp_path):
        db, path, by_file, _ = demo
        run = by_file["k410_2023_up.wav"]
        df = pd.read_csv(_export(path, run, "speed", tmp_path / "s.csv"))
        with db.read() as conn:
            t, rpm = q.load_speed_profile(conn, run)
        assert list(df.columns) == list(ex.SPEED_COLUMNS)
        np.testing.assert_array_equal(df.time_s, t)
        np.testing.assert_array_equal(df.speed_rpm, rpm)
        assert (np.diff(df.revolution) == 1).all()

    def test_findings_carry_the_verdict_and_the_caution(self, demo, tmp_path):
        db, path, by_file, _ = demo
        run = by_file["k410_2025_up.wav"]
        df = pd.read_csv(_export(path, run, "findings", tmp_path / "f.csv"))
        with db.read() as conn:
            f = q.load_processing(conn, run).findings
        assert len(df) == len(f["criticals"]) > 0
        assert set(df.caution) == {CAUTION}
        assert set(df.run_verdict) == {f["run_verdict"]}
        np.testing.assert_allclose(df.speed_rpm, [c["speed_rpm"] for c in f["criticals"]],
                                   rtol=1e-15)
        assert list(df.band_lo_rpm) == pytest.approx([c["band_rpm"][0] for c in f["criticals"]])
        assert {"probe", "direction", "af_half_power", "separation_margin_pct",
                "margin_verdict", "evidence"} <= set(df.columns)

    def test_limits_xlsx_carry_the_caution(self, demo, tmp_path):
        import openpyxl

        db, path, by_file, _ = demo
        run = by_file["k410_2023_up.wav"]
        out = _export(path, run, "limits", tmp_path / "l.xlsx")
        rows = list(openpyxl.load_workbook(out, read_only=True)["limits"].iter_rows(values_only=True))
        col = {c: i for i, c in enumerate(rows[0])}
        with db.read() as conn:
            f = q.load_processing(conn, run).findings
        assert len(rows) - 1 == len(f["limits"])
        assert {r[col["caution"]] for r in rows[1:]} == {CAUTION}
        assert [r[col["verdict"]] for r in rows[1:]] == [x["verdict"] for x in f["limits"]]

    def test_cascade_of_one_probe(self, demo, tmp_path):
        db, path, by_file, _ = demo
        run = by_file["k410_2023_up.wav"]
        df = pd.read_parquet(_export(path, run, "cascade", tmp_path / "c.parquet",
                                     "--probe", "K410-NDE-X"))
        with db.read() as conn:
            (c,) = [c for c in q.load_cascades(conn, run) if c.probe_name == "K410-NDE-X"]
        assert len(df) == c.amplitude.size
        np.testing.assert_array_equal(df.amplitude.to_numpy().reshape(c.amplitude.shape),
                                      c.amplitude)
        line = df[df.line == 10]
        np.testing.assert_allclose(line.order, line.freq_hz * 60 / line.speed_rpm)

    def test_compare_as_csv(self, demo, tmp_path, capsys):
        db, path, by_file, _ = demo
        a, b = by_file["k410_2023_up.wav"], by_file["k410_2025_up.wav"]
        out = tmp_path / "cmp.csv"
        assert main(["compare", str(a), str(b), "--db", str(path), "--boot", "10",
                     "--format", "csv", "-o", str(out)]) == 0
        df = pd.read_csv(out)
        assert list(df.columns) == list(ex.COMPARISON_COLUMNS)
        assert set(df.caution) == {CAUTION}
        assert set(df.run_a) == {a} and set(df.run_b) == {b}
        speed = df[(df.quantity == "critical speed") & (df.probe == "K410-DE-X")]
        assert len(speed) >= 1 and (speed.delta == speed.b - speed.a).all()
        assert {"critical", "phase", "slow roll"} <= set(df.section)
        capsys.readouterr()
        assert main(["compare", str(a), str(b), "--db", str(path), "--boot", "10",
                     "--format", "csv"]) == 0
        assert capsys.readouterr().out.splitlines()[0] == ",".join(ex.COMPARISON_COLUMNS)


class TestRefusals:
    @pytest.mark.parametrize("args, words", [
        (["--what", "vectors", "--orders", "7", "-o", "x.csv"], "no vectors of order(s) 7"),
        (["--what", "vectors", "--probe", "NOPE", "-o", "x.csv"], "no vectors of probe 'NOPE'"),
        (["--what", "speed", "-o", "x.txt"], "cannot tell the format"),
    ])
    def test_one_line(self, demo, tmp_path, capsys, args, words):
        _, path, by_file, _ = demo
        args = [a if a not in ("x.csv", "x.txt") else str(tmp_path / a) for a in args]
        assert main(["export", str(by_file["k410_2023_up.wav"]), "--db", str(path), *args]) == 1
        err = capsys.readouterr().err.strip()
        assert len(err.splitlines()) == 1 and words in err

    def test_unprocessed_run(self, tmp_path, capsys):
        from rundash.ingest.importer import import_run
        from rundash.ingest.machine_file import load_machine_description

        folder = sample_runs_dir()
        desc, text = load_machine_description(folder / "tarnwick-k410.toml")
        path = tmp_path / "raw.sqlite"
        db = open_database(str(path), create=True)
        run = import_run(db, folder / "k410_2023_up.wav", desc, description_text=text).run_id
        db.dispose()
        assert main(["export", str(run), "--db", str(path), "--what", "findings",
                     "-o", str(tmp_path / "f.csv")]) == 1
        assert "not processed yet" in capsys.readouterr().err

    def test_a_spreadsheet_too_long_is_refused(self):
        df = pd.DataFrame({"x": np.zeros(ex.XLSX_MAX_ROWS)})
        with pytest.raises(InputError, match="more than a spreadsheet holds"):
            ex.table_bytes(df, "xlsx")
