"""`rundash compare` on the demo machine: the comparison finds the change built into the
later overhaul cycle.

Ground truth: sample_runs/scenario.json and sample_runs/README.md, written by
sample_runs/generate.py (which does not import rundash): between the 2023 and 2025
cycles the oil film is 8 % softer and 40 % less damped, so the first critical comes
down about 3.4 % (DE-X 3476 -> 3357 rpm, DE-Y 3724 -> 3599 rpm, steady-state peaks) and
its half-power AF rises from about 6 to about 9.
"""

from __future__ import annotations

import json

import pytest

from rundash import CAUTION
from rundash.cli import main
from rundash.workflows.comparison import SCHEMA, compare_runs
from rundash.workflows.demo import build_demo, sample_runs_dir
from rundash.storage import queries as q
from rundash.storage.engine import open_database

SCENARIO = json.loads((sample_runs_dir() / "scenario.json").read_text())
N_BOOT = 30


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    path = tmp_path_factory.mktemp("cmp") / "demo.sqlite"
    db = open_database(str(path), create=True)
    ids = build_demo(db)
    with db.read() as conn:
        by_file = {q.get_run(conn, i).source_name: i for i in ids}
    yield db, path, by_file
    db.dispose()


def _truth(run_key, probe):
    peaks = SCENARIO["runs"][run_key]["probes"][probe]["peaks"]
    return min(peaks, key=lambda p: p["peak_rpm"])  # the first critical


@pytest.fixture(scope="module")
def up_vs_up(demo):
    db, _, by_file = demo
    return compare_runs(db, [by_file["k410_2023_up.wav"], by_file["k410_2025_up.wav"]],
                        n_boot=N_BOOT)


class TestCompareDemo:
    @pytest.mark.parametrize("probe", ["K410-DE-X", "K410-DE-Y"])
    def test_finds_the_change_of_the_later_cycle(self, up_vs_up, probe):
        (pair,) = up_vs_up["pairs"]
        pr = next(p for p in pair["probes"] if p["probe"] == probe)
        assert pr["direction_a"] == pr["direction_b"] == "run-up" and pr["like_with_like"]
        m = min((m for m in pr["criticals"] if m["a"] and m["b"]),
                key=lambda m: m["a"]["speed_rpm"])
        a, b = _truth("2023_up", probe), _truth("2025_up", probe)
        true_pct = 100 * (b["peak_rpm"] - a["peak_rpm"]) / a["peak_rpm"]
        # the scenario's shift is -3.4 % (scenario.json); our estimate reads the swept
        # runs, whose apparent peaks sit 8-16 rpm above the steady ones (as_simulated_peaks,
        # Lewis 1932), so agree within 0.3 % points (about 10 rpm)
        assert true_pct == pytest.approx(-3.4, abs=0.1)
        assert m["speed"]["delta_pct"] == pytest.approx(true_pct, abs=0.3)
        assert m["speed"]["significant"] and m["af"]["significant"] and m["changed"]
        # AF about 6 -> about 9 (scenario.json half-power AFs), within 10 % (issue 4 rule)
        assert m["a"]["af"] == pytest.approx(a["af_half_power"], rel=0.10)
        assert m["b"]["af"] == pytest.approx(b["af_half_power"], rel=0.10)
        assert any("moved down" in h for h in m["hints"])
        assert any("loss of damping" in h for h in m["hints"])
        assert pair["verdict"] == "changed"

    def test_uncertainties_are_stated_and_positive(self, up_vs_up):
        for run in up_vs_up["runs"]:
            for e in run["estimates"]:
                for c in e["criticals"]:
                    if c["reproducible"]:
                        assert c["speed_std_rpm"] > 0 and c["n_boot"] == N_BOOT
        assert "k = 2" in up_vs_up["rule"] and "bootstrap" in up_vs_up["method"]

    def test_schema_and_caution(self, up_vs_up):
        assert up_vs_up["schema"] == SCHEMA == "rundash.comparison/1"
        assert up_vs_up["caution"] == CAUTION

    def test_mixed_directions_are_said(self, demo):
        db, _, by_file = demo
        c = compare_runs(db, [by_file["k410_2023_up.wav"], by_file["k410_2023_down.wav"]],
                         n_boot=5, phase_speeds_rpm=[])
        pr = c["pairs"][0]["probes"][0]
        assert (pr["direction_a"], pr["direction_b"]) == ("run-up", "coast-down")
        assert not pr["like_with_like"] and any("Lewis" in n for n in pr["notes"])


class TestCompareCli:
    def test_text(self, demo, capsys):
        _, path, by_file = demo
        a, b = by_file["k410_2023_up.wav"], by_file["k410_2025_up.wav"]
        assert main(["compare", str(a), str(b), "--db", str(path), "--boot", "10"]) == 0
        out = capsys.readouterr().out
        assert "CHANGED" in out and "K410-DE-X" in out and "moved down" in out
        assert "significant" in out and CAUTION in out

    def test_json(self, demo, capsys):
        _, path, by_file = demo
        a, b = by_file["k410_2023_up.wav"], by_file["k410_2025_up.wav"]
        assert main(["compare", str(a), str(b), "--db", str(path), "--boot", "5", "--json",
                     "--speeds", "5000"]) == 0
        j = json.loads(capsys.readouterr().out)
        assert j["schema"] == "rundash.comparison/1" and j["caution"] == CAUTION
        assert j["phase_speeds_rpm"] == [5000.0]

    @pytest.mark.parametrize("argv, words", [
        (["compare", "1"], "two or more different run ids"),
        (["compare", "1", "999"], "no run with id 999"),
        (["compare", "1", "2", "--speeds", "fast"], "Invalid value for '--speeds'"),
    ])
    def test_errors_one_line(self, demo, capsys, argv, words):
        _, path, _ = demo
        assert main(argv + ["--db", str(path)]) == 1
        err = capsys.readouterr().err.strip()
        assert words in err and len(err.splitlines()) == 1
