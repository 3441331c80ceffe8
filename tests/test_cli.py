"""The CLI called as main([...]): exit codes, one-line errors, the tables it prints."""

from __future__ import annotations

import json

import pytest

from rundash.cli import main
from tests.ingest.test_importer import write_csv


@pytest.fixture
def csv_file(tmp_path):
    p = tmp_path / "r1.csv"
    write_csv(p, n=3000)
    return p


class TestImportAndList:
    def test_import_prints_run_id_and_runs_lists_it(self, db_path, machine_file, csv_file,
                                                   capsys):
        assert main(["import", str(csv_file), "--machine", str(machine_file), "--db",
                     str(db_path), "--label", "first start", "--cycle", "2026 overhaul",
                     "--started", "2026-05-01T06:00:00Z", "--kind", "run-up", "--quiet"]) == 0
        assert capsys.readouterr().out.strip() == "1"
        assert main(["runs", "--db", str(db_path), "--json"]) == 0
        runs = json.loads(capsys.readouterr().out)
        assert runs[0]["label"] == "first start" and runs[0]["cycle"] == "2026 overhaul"
        assert runs[0]["started_at"] == "2026-05-01T06:00:00+00:00"
        assert runs[0]["state"] == "complete" and runs[0]["duration_s"] == 3.0
        assert main(["machines", "--db", str(db_path)]) == 0
        out = capsys.readouterr().out
        assert "Test rig T-1" in out and "5000-6300" in out and "api617" in out

    def test_kind_marks_a_shop_test(self, db_path, machine_file, csv_file, capsys):
        # a run marked as a shop (mechanical running) test at import: its direction is
        # left to processing, its test kind decides which rules are in scope
        assert main(["import", str(csv_file), "--machine", str(machine_file), "--db",
                     str(db_path), "--kind", "shop-test", "--quiet"]) == 0
        capsys.readouterr()
        assert main(["runs", "--db", str(db_path), "--json"]) == 0
        (run,) = json.loads(capsys.readouterr().out)
        assert run["test_kind"] == "shop-test" and run["kind"] == "mixed"
        assert main(["runs", "--db", str(db_path)]) == 0
        assert "mixed, shop-test" in capsys.readouterr().out

    def test_environment_variable_names_the_database(self, tmp_path, machine_file, csv_file,
                                                     monkeypatch, capsys):
        monkeypatch.setenv("RUNDASH_DB", str(tmp_path / "env.sqlite"))
        assert main(["import", str(csv_file), "--machine", str(machine_file), "--quiet"]) == 0
        assert (tmp_path / "env.sqlite").exists()

    @pytest.mark.parametrize("args, match", [
        (["--started", "yesterday"], "Invalid value for '--started'"),
        (["--started", "2026-05-01T06:00:00"], "a time with its zone"),
    ])
    def test_bad_option_is_one_line_and_exit_1(self, db_path, machine_file, csv_file, capsys,
                                               args, match):
        rc = main(["import", str(csv_file), "--machine", str(machine_file), "--db",
                   str(db_path), "--quiet", *args])
        err = capsys.readouterr().err.strip()
        assert rc == 1 and match in err and len(err.splitlines()) == 1

    def test_bad_machine_file_is_one_line_and_exit_1(self, db_path, tmp_path, csv_file, capsys):
        m = tmp_path / "bad.toml"
        m.write_text("[machine]\nname='x'\n", encoding="utf-8")
        rc = main(["import", str(csv_file), "--machine", str(m), "--db", str(db_path)])
        err = capsys.readouterr().err.strip()
        assert rc == 1 and len(err.splitlines()) == 1
        assert err == "rundash import: error: bad.toml: [tach]: missing required table"

    def test_duplicate_import_exit_1(self, db_path, machine_file, csv_file, capsys):
        args = ["import", str(csv_file), "--machine", str(machine_file), "--db", str(db_path),
                "--quiet"]
        assert main(args) == 0
        assert main(args) == 1
        assert "imported before as run 1" in capsys.readouterr().err


class TestTablesStayTables:
    """Names are the user's text: a line break or 100 000 characters must not break the
    tables (each row one line, each cell at most 40 characters)."""

    def test_machines_and_runs_with_awkward_names(self, db_path, tmp_path, csv_file, capsys):
        from tests.conftest import EXAMPLE_MACHINE
        names = ['K-101\\nsecond line\\r', "L" * 100_000]
        for i, name in enumerate(names):
            m = tmp_path / f"m{i}.toml"
            m.write_text(EXAMPLE_MACHINE.replace('name = "Test rig T-1"', f'name = "{name}"'),
                         encoding="utf-8")
            assert main(["import", str(csv_file), "--machine", str(m), "--db", str(db_path),
                         "--quiet", "--force", "--label", "x\ty\nz"]) == 0
        capsys.readouterr()
        for command in ("machines", "runs"):
            assert main([command, "--db", str(db_path)]) == 0
            lines = capsys.readouterr().out.splitlines()
            assert len(lines) == 2 + len(names), lines  # header, rule, one line per row
            assert max(len(ln) for ln in lines) < 300
            assert any("K-101\\nsecond line\\r" in ln for ln in lines)
            assert any(("L" * 39 + "…") in ln and "L" * 40 not in ln for ln in lines)
        assert main(["runs", "--db", str(db_path), "--json"]) == 0  # JSON keeps the full text
        runs = json.loads(capsys.readouterr().out)
        assert {r["machine"] for r in runs} == {"K-101\nsecond line\r", "L" * 100_000}


def test_collector_frozen_only_when_the_command_line_is_the_program(db_path, machine_file,
                                                                     csv_file, capsys):
    # gc.freeze (settle_imports) keeps a caller's own collector as it was when main() runs
    # inside its process; as the program, the import and what it imported are frozen
    import gc
    import subprocess
    import sys

    before = gc.get_freeze_count()
    assert main(["import", str(csv_file), "--machine", str(machine_file), "--db", str(db_path),
                 "--quiet"]) == 0
    assert gc.get_freeze_count() == before
    code = ("import gc, sys; from rundash.cli import main; sys.argv[1:] = ['runs', '--db', "
            f"{str(db_path)!r}]; main(); print(gc.get_freeze_count() > 10000, file=sys.stderr)")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert done.stderr.strip().splitlines()[-1] == "True"
