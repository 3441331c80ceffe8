"""Engineering significance in comparisons: two runs of one cycle that differ only by
independent noise flag nothing, and every shift says its floor and its units.

Both runs are the same quasi-steady single-degree-of-freedom unbalance response
(tests/live_synth.py: e r^2 / (1 - r^2 + 2 j zeta r), W. T. Thomson and M. D. Dahleh,
Theory of Vibration with Applications, 5th ed., 1998, sec. 3.3; fn 3000 rpm, zeta 0.05)
swept 600 -> 5600 rpm at 100 rpm/s, written to WAV files with independent noise (seeds
11 and 12), imported and processed into a real database; then `rundash compare`.
"""

from __future__ import annotations

import json

import pytest

from rundash.cli import main
from rundash.ingest.importer import import_run
from rundash.ingest.machine_file import parse_machine_description
from rundash.workflows.comparison import compare_runs
from rundash.workflows.pipeline import process_run
from tests import live_synth

pytestmark = pytest.mark.both_databases


def _runs_of_one_cycle(db, tmp_path, seeds) -> list[int]:
    """Runs of cycle 2026 with independent noise (one per seed), imported and processed."""
    desc = parse_machine_description(live_synth.MACHINE, "rig.toml")
    ids = []
    for seed in seeds:
        wav = tmp_path / f"run{seed}.wav"
        live_synth.write_run(wav, [0, 50], [600, 5600], seed=seed, noise_um=2.0)
        res = import_run(db, wav, desc, description_text=live_synth.MACHINE, cycle="2026")
        process_run(db, res.run_id)
        ids.append(res.run_id)
    return ids


def test_two_runs_of_one_cycle_with_noise_only_flag_nothing(db, db_url, tmp_path, capsys):
    ids = _runs_of_one_cycle(db, tmp_path, (11, 12))
    c = compare_runs(db, ids, n_boot=20, phase_speeds_rpm=[2000.0, 4400.0])
    (pair,) = c["pairs"]
    assert pair["verdict"] == "no significant change"
    shifts = []
    for pr in pair["probes"]:
        assert pr["verdict"] == "no significant change"
        for m in pr["criticals"]:
            assert not m["changed"]
            shifts += [s for s in (m["speed"], m["af"], m["peak_amplitude"]) if s]
        shifts += [s for s in pr["phase"] if s]
    assert shifts and not any(s["flagged"] for s in shifts)
    # two runs of one cycle alone: their repeatability is not estimated from their own
    # difference (said), the uncertainties stay the bootstrap's
    for pr in pair["probes"]:
        assert pr["repeatability"] == {"a": None, "b": None}
        assert any("cannot be estimated without their own difference" in n for n in pr["notes"])
    for s in shifts:
        # every shift has its units (AF is a ratio) and its floor with the source
        if not s["quantity"].startswith("AF"):
            assert s["units"], s["quantity"]
        assert s["floor"] is not None and s["floor_source"]
    amp = [s for s in shifts if s["quantity"].startswith("1X at") or s["quantity"] ==
           "peak amplitude"]
    assert amp and all("criterion II" in s["floor_source"] and s["units"] == "µm pp"
                       for s in amp)
    # the floor of the 1X at 4400 rpm: 25 % of ISO 7919-3's B/C 9000/sqrt(4400) = 33.9 um
    # p-p, i.e. 8.48 um p-p (ISO 10816-1 / 20816-1 criterion II, from memory)
    a4400 = next(s for s in amp if s["quantity"] == "1X at 4400 rpm")
    assert a4400["floor"] == pytest.approx(0.25 * 9000 / 4400 ** 0.5, rel=1e-9)
    # the command line says the same
    assert main(["compare", *map(str, ids), "--db", db_url, "--boot", "10", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["pairs"][0]["verdict"] == "no significant change"


def test_run_to_run_repeatability_widens_the_uncertainty(db, tmp_path):
    # three runs of one cycle, independent noise only (seeds 11-13): each pair's
    # uncertainty adds the scatter between its run and the third run of the cycle,
    # sigma_rep^2 = max(0, s^2 - mean(sigma_boot^2)) (one-way random-effects model by
    # moments, as ISO 5725-2 separates repeatability from between-run scatter; from
    # memory); the pair's own other run is left out. Nothing flagged.
    ids = _runs_of_one_cycle(db, tmp_path, (11, 12, 13))
    c = compare_runs(db, ids, n_boot=20, phase_speeds_rpm=[2000.0, 4400.0])
    assert "ISO 5725-2" in c["repeatability"]
    boot = {r["id"]: {(e["probe"], e["direction"]): e for e in r["estimates"]} for r in c["runs"]}
    p12, p13 = c["pairs"]
    for pair, third in ((p12, ids[2]), (p13, ids[1])):
        assert pair["verdict"] == "no significant change"
        for pr in pair["probes"]:
            assert pr["repeatability"]["a"]["runs"] == [pair["a"], third]
            assert pr["repeatability"]["b"]["runs"] == [pair["b"], third]
            assert any("run-to-run repeatability" in n for n in pr["notes"])
            for m in pr["criticals"]:
                assert not m["changed"]
                key = (pr["probe"], pr["direction_a"])
                e_a = boot[pair["a"]][key]["criticals"]
                e_3 = boot[third][key]["criticals"]
                a0 = min(e_a, key=lambda x: abs(x["speed_rpm"] - m["a"]["speed_rpm"]))
                a3 = min(e_3, key=lambda x: abs(x["speed_rpm"] - m["a"]["speed_rpm"]))
                v = [a0["speed_rpm"], a3["speed_rpm"]]
                s_boot = [a0["speed_std_rpm"], a3["speed_std_rpm"]]
                rep = max(0.0, (v[0] - v[1]) ** 2 / 2 - (s_boot[0] ** 2 + s_boot[1] ** 2) / 2)
                assert m["repeatability"]["a"]["speed_rpm"] == pytest.approx(rep ** 0.5,
                                                                             rel=1e-6, abs=1e-9)
                assert m["speed"]["a_std"] == pytest.approx(
                    (s_boot[0] ** 2 + rep) ** 0.5, rel=1e-6)
                assert not m["speed"]["flagged"]
