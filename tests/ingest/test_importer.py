"""Import lands whole or not at all; bad input leaves the database byte-identical."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from rundash.errors import DuplicateRunError, InputError
from rundash.ingest.importer import import_run
from rundash.ingest.machine_file import load_machine_description
from rundash.storage import queries as q
from rundash.storage.engine import open_database
from tests.conftest import count_chunks, db_fingerprint

FS = 1000.0


def write_csv(path, n=150_000, *, bad_row=None, seed=0):
    rng = np.random.default_rng(seed)
    t = np.arange(n) / FS
    cols = {"time_s": t, "tach": np.where(np.mod(t * 10, 1) < 0.2, 5.0, 0.0),
            "x1": 0.3937 * np.sin(2 * np.pi * 10 * t),  # 50 um peak at 7.874 mV/um
            "y1": 0.3937 * np.cos(2 * np.pi * 10 * t),
            "v1": 0.004 * rng.standard_normal(n)}
    import pandas as pd
    df = pd.DataFrame(cols)
    df.to_csv(path, index=False, float_format="%.10g")
    if bad_row is not None:
        lines = path.read_text().splitlines()
        lines[bad_row] = lines[bad_row].rsplit(",", 1)[0] + ",oops"
        path.write_text("\n".join(lines) + "\n")
    return cols


@pytest.fixture
def desc(machine_file):
    return load_machine_description(machine_file)


class TestImportRun:
    def test_import_stores_scaled_channels_in_chunks(self, db, desc, tmp_path):
        d, text = desc
        cols = write_csv(tmp_path / "r.csv")
        res = import_run(db, tmp_path / "r.csv", d, description_text=text, label="first",
                         cycle="2026")
        assert res.n_samples == 150_000 and res.n_channels == 4
        with db.read() as conn:
            run = q.get_run(conn, res.run_id)
            chans = q.list_channels(conn, res.run_id)
            x1 = q.read_channel(conn, chans[1].id)
            n_chunks = count_chunks(conn, chans[1].id)
        assert run.state == "complete" and run.label == "first" and run.cycle == "2026"
        assert [c.name for c in chans] == ["tach", "x1", "y1", "v1"]
        assert [c.unit for c in chans] == ["V", "um", "um", "mm/s"]
        assert n_chunks == -(-150_000 // q.CHUNK_SAMPLES)
        # 0.3937 V at 7.874 mV/um is 50 um (float32 storage: 1e-6 relative)
        assert_allclose(x1, cols["x1"] * 1000 / 7.874, rtol=1e-6, atol=1e-4)

    def test_same_file_twice_is_refused_unless_forced(self, db, desc, tmp_path):
        d, _ = desc
        write_csv(tmp_path / "r.csv", n=3000)
        first = import_run(db, tmp_path / "r.csv", d)
        fp = db_fingerprint(db)
        with pytest.raises(DuplicateRunError, match=rf"imported before as run {first.run_id}"):
            import_run(db, tmp_path / "r.csv", d)
        assert db_fingerprint(db) == fp
        again = import_run(db, tmp_path / "r.csv", d, force=True)
        assert again.run_id != first.run_id

    @pytest.mark.parametrize("case", ["bad_row_late", "missing_channel", "nan_late", "huge"])
    def test_bad_input_leaves_database_byte_identical(self, db, desc, tmp_path, case):
        d, _ = desc
        write_csv(tmp_path / "ok.csv", n=2000)
        import_run(db, tmp_path / "ok.csv", d)
        before = db_fingerprint(db)
        p = tmp_path / "bad.csv"
        if case == "bad_row_late":
            write_csv(p, n=140_000, bad_row=139_000)
            # the cell is named exactly (it was "near row" before the CSV reader located it)
            match = r"bad.csv: column 'v1', row 139001: 'oops' is not a number"
        elif case == "missing_channel":
            p.write_text("time_s,tach,x1,y1\n0,0,0,0\n0.001,0,0,0\n", encoding="utf-8")
            match = r"bad.csv: channel 'v1' named in the machine description is not in the file"
        elif case == "nan_late":
            write_csv(p, n=140_000)
            lines = p.read_text().splitlines()
            lines[135_001] = lines[135_001].replace(lines[135_001].split(",")[2], "nan", 1)
            p.write_text("\n".join(lines) + "\n")
            match = r"bad.csv: channel 'x1', row 135002"
        else:
            write_csv(p, n=3000)
            lines = p.read_text().splitlines()
            lines[2500] = ",".join(lines[2500].split(",")[:2] + ["1e300"] + lines[2500].split(",")[3:])
            p.write_text("\n".join(lines) + "\n")
            match = r"bad.csv: channel 'x1', sample 2499: value .* does not fit a float32"
        with pytest.raises(InputError, match=match):
            import_run(db, p, d)
        assert db_fingerprint(db) == before
        with db.read() as conn:
            assert len(q.list_runs(conn)) == 1

    def test_probe_units_convert_to_storage_units(self, db, tmp_path, machine_file):
        text = machine_file.read_text().replace('units = "um"', 'units = "mil"').replace(
            "sensitivity_mv_per_unit = 7.874", "sensitivity_mv_per_unit = 200.0")
        from rundash.ingest.machine_file import parse_machine_description
        d = parse_machine_description(text, "m.toml")
        cols = write_csv(tmp_path / "r.csv", n=2000)
        res = import_run(db, tmp_path / "r.csv", d)
        with db.read() as conn:
            ch = q.list_channels(conn, res.run_id)[1]
            x1 = q.read_channel(conn, ch.id)
        # 200 mV/mil; 1 mil = 25.4 um exactly
        assert_allclose(x1, cols["x1"] / 0.2 * 25.4, rtol=1e-6, atol=1e-4)
