"""One rendering: the CLI, the run review page and the report show the same numbers for
the demo's runs, because all three render the findings and the comparison through
rundash.presentation.

The cells are checked against the findings JSON itself (the speed of each critical is its
``speed_rpm`` to the rpm, its required margin to 0.1 %; the rows' formats are ours, no
outside source), and then looked for, cell by cell, in what each face shows.
"""

from __future__ import annotations

import html
import re

import pytest

from rundash import presentation as pr
from rundash.cli import main
from rundash.dashboard.pages import compare as compare_page
from rundash.dashboard.pages import review
from rundash.report.html import load_report_data, render
from rundash.storage import queries as q
from rundash.storage.engine import open_database
from rundash.workflows.demo import build_demo
from tests.dashboard.test_callbacks import _text

N_BOOT = 20  # every face asked for the same bootstrap, so the sigmas are the same


def _plain(page: str) -> str:
    page = re.sub(r"<script.*?</script>", " ", page, flags=re.S)
    return html.unescape(re.sub(r"<[^>]+>", " ", page))


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    path = tmp_path_factory.mktemp("present") / "demo.sqlite"
    db = open_database(str(path), create=True)
    ids = build_demo(db)
    yield db, path, ids
    db.dispose()


def _faces(db, path, run_id, capsys):
    assert main(["findings", str(run_id), "--db", str(path)]) == 0
    cli = capsys.readouterr().out
    page = _text(review.verdict_panel(review.load_context(db, run_id)))
    report = _plain(render(load_report_data(db, run_id)))
    return {"cli": cli, "review page": page, "report": report}


def test_findings_cells_are_the_json_and_every_face_shows_them(demo, capsys):
    db, path, ids = demo
    checked = 0
    for run_id in ids:
        with db.read() as conn:
            f = q.load_processing(conn, run_id).findings
        assert {p["name"]: p["kind"] for p in f["probes"]} and all(
            p["kind"] in ("proximity", "velocity", "acceleration") for p in f["probes"])
        crit = pr.critical_rows(f)
        assert len(crit) == len(f["criticals"]) > 0
        for row, c in zip(crit, f["criticals"]):
            assert row["speed"] == f"{c['speed_rpm']:,.0f}"
            assert row["required"].startswith(f"{c['required_margin_pct']:.1f} %") or \
                row["required"].startswith("none")
            assert row["peak"].endswith(c["amplitude_units"].replace("um", "µm"))
            # apparent and sweep-free side by side, the governing one marked
            assert row["apparent"].startswith(f"{c['apparent']['speed_rpm']:,.0f}, AF")
            if c["governing"] == "sweep-free":
                assert row["sweep_free"].startswith(f"{c['sweep_free']['speed_rpm']:,.0f}")
                assert row["sweep_free"].endswith(pr.GOVERNS_MARK)
                assert row["speed"] == f"{c['sweep_free']['speed_rpm']:,.0f}"
            elif c["governing"] == "apparent":
                assert row["apparent"].endswith(pr.GOVERNS_MARK)
                assert row["governing_reason"]
        judged = [r for r in pr.limit_rows(f) if r["judged"]]
        summary = pr.summary_line(f)
        faces = _faces(db, path, run_id, capsys)
        for name, text in faces.items():
            # the counts of what was judged, in one sentence, the same on every face
            assert summary in " ".join(text.split()), (name, run_id, summary)
            for row in crit:
                for key in ("probe", "speed", "peak", "margin", "required", "verdict",
                            "apparent", "sweep_free", "confidence"):
                    assert row[key] in text, (name, run_id, key, row[key])
                    checked += 1
            for row in judged:
                for key in ("value", "limit", "speed"):
                    assert row[key] in text, (name, run_id, key, row[key])
                    checked += 1
    assert checked > 100


def test_comparison_cells_are_the_same_in_cli_page_and_report(demo, capsys):
    db, path, ids = demo
    with db.read() as conn:
        runs = sorted((q.get_run(conn, r) for r in ids), key=lambda r: r.started_at)
    ups = [r.id for r in runs if r.kind == "run-up"][:2]
    assert main(["compare", *map(str, ups), "--db", str(path), "--boot", str(N_BOOT)]) == 0
    cli = capsys.readouterr().out
    comparison = compare_page.comparison_of(db, ups, n_boot=N_BOOT)
    rows = pr.shift_rows(comparison)
    assert rows
    probes = sorted({r["probe"] for r in rows})
    page = " ".join(_text(compare_page.comparison_view(db, ups, p, n_boot=N_BOOT)[1])
                    for p in probes)
    report = _plain(render(load_report_data(db, ups[0], [ups[1]], n_boot=N_BOOT)))
    m = comparison["pairs"][0]["probes"][0]["criticals"][0]
    assert rows[0]["speed_shift"].startswith(f"{m['speed']['delta']:+,.1f} ± "
                                             f"{m['speed']['sigma']:.2g} rpm")
    for name, text in {"cli": cli, "compare page": page, "report": report}.items():
        for row in rows:
            for key in ("probe", "speed_shift", "af_shift"):
                assert row[key] in text, (name, key, row[key])


def test_sweep_free_uncertainty_said_statistical_only_when_the_fit_is_poor():
    """A modal model that leaves a systematic misfit (several times the noise) errs by
    more than a bootstrap over independent residuals says: its ± are marked as
    statistical only (common practice, no source): the reading's cell drops them and says
    the fit is poor, the model's summary says so."""
    from rundash.presentation.modal import modal_model_lines, reading_cells
    from rundash.workflows.modal import UNCERTAINTY_NOTE

    crit = {"apparent": {"speed_rpm": 3487.0, "af": 5.86}, "governing": "apparent",
            "sweep_free": {"speed_rpm": 3479.0, "speed_std_rpm": 0.4, "af": 5.82,
                           "af_std": 0.0078, "fit_good": False,
                           "uncertainty_note": UNCERTAINTY_NOTE}}
    cells = reading_cells(crit)
    assert cells["sweep_free"] == "3,479, AF 5.82; fit poor"
    assert "(governs)" in cells["apparent"]
    good = dict(crit, sweep_free=dict(crit["sweep_free"], fit_good=True,
                                      uncertainty_note=None))
    assert reading_cells(good)["sweep_free"] == "3,479 ± 0.4, AF 5.82 ± 0.0078"
    mm = {"modal_model": {"status": "fitted", "fitted_probes": ["A"], "misfit_ratio": 26.5,
                          "modes": []}}
    assert "statistical only" in modal_model_lines(mm)[0]
    mm["modal_model"]["misfit_ratio"] = 1.1
    assert "statistical only" not in modal_model_lines(mm)[0]
