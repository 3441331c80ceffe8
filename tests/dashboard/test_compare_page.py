"""The compare page and the report downloads, called directly with plain values.

Database: the demo (rundash.workflows.demo.build_demo, four runs of an invented compressor over two
overhaul cycles; runs 1 and 3 are the two run-ups). Ground truth of the demo is
sample_runs/scenario.json, written by sample_runs/generate.py, which does not import
rundash: between the cycles the first critical comes down about 3.4 % and its AF rises
from about 6 to about 9.
"""

from __future__ import annotations

import base64
import html
import json

import numpy as np
import plotly.graph_objects as go
import pytest
from numpy.testing import assert_allclose

from rundash import CAUTION, figures
from rundash.dashboard import ids, reports
from rundash.dashboard.cache import ResultCache
from rundash.dashboard.pages import compare as cp
from rundash.dashboard.pages import review, runs
from rundash.workflows.demo import build_demo, sample_runs_dir
from rundash.storage import queries as q
from rundash.storage.engine import open_database
from tests.dashboard.test_callbacks import _arr, _find, _text

SCENARIO = json.loads((sample_runs_dir() / "scenario.json").read_text())
PROBE = "K410-DE-X"


@pytest.fixture(scope="module")
def demo_full(tmp_path_factory):
    """The demo database, all four runs processed; ids by source file."""
    db = open_database(str(tmp_path_factory.mktemp("cmp-page") / "demo.sqlite"), create=True)
    got = build_demo(db)
    with db.read() as conn:
        by_file = {q.get_run(conn, i).source_name: i for i in got}
    yield db, by_file
    db.dispose()


@pytest.fixture(scope="module")
def ups(demo_full):
    _, by_file = demo_full
    return by_file["k410_2023_up.wav"], by_file["k410_2025_up.wav"]


@pytest.fixture(scope="module")
def cache(demo_full):
    return ResultCache(demo_full[0])


@pytest.fixture(scope="module")
def all_four(demo_full, cache):
    db, by_file = demo_full
    return cp.comparison_of(db, list(by_file.values()), cache=cache)


def _estimates(comparison, probe, direction):
    """(run id, first critical) of every run with a critical of probe and direction."""
    out = []
    for r in comparison["runs"]:
        for e in r["estimates"]:
            if e["probe"] == probe and e["direction"] == direction and e["criticals"]:
                out.append((r["id"], min(e["criticals"], key=lambda c: c["speed_rpm"])))
    return out


class TestRoutes:
    def test_match(self):
        assert cp.match("/compare") == {}
        assert cp.match("/compare/") == {}
        assert cp.match("/compare/1,3") == {"run_ids": [1, 3]}
        assert cp.match("/compare/machine/2") == {"machine_id": 2}
        assert cp.match("/compare/x") is None
        assert cp.match("/comparex") is None
        assert cp.href([1, 3]) == "/compare/1,3"


class TestTrendFigure:
    def test_points_and_error_bars_are_the_comparisons(self, all_four):
        fig = figures.comparison_trend(all_four, probe=PROBE)
        go.Figure(fig.to_dict())  # plotly validates the dict figure
        d = fig.to_dict()
        trend = [t for t in d["data"] if t.get("meta") == "trend"]
        for direction in ("run-up", "coast-down"):
            est = _estimates(all_four, PROBE, direction)
            assert len(est) == 2  # one run of each direction per cycle
            speed = next(t for t in trend if t["name"] == f"critical 1, {direction}"
                         and t["yaxis"] == "y")
            af = next(t for t in trend if t["name"] == f"critical 1, {direction}"
                      and t["yaxis"] == "y2")
            assert list(speed["customdata"]) == [r for r, _ in est]
            assert_allclose(_arr(speed["y"]), [c["speed_rpm"] for _, c in est], rtol=0)
            assert_allclose(_arr(speed["error_y"]["array"]),
                            [c["speed_std_rpm"] for _, c in est], rtol=0)
            assert_allclose(_arr(af["y"]), [c["af"] for _, c in est], rtol=0)
            assert_allclose(_arr(af["error_y"]["array"]), [c["af_std"] for _, c in est],
                            rtol=0)
            assert speed["error_y"]["visible"] and af["error_y"]["visible"]
            assert speed["marker"]["symbol"] == figures.DIRECTION_STYLE[direction]["symbol"]

    def test_cycle_bands_and_marker_colours(self, all_four):
        d = figures.comparison_trend(all_four, probe=PROBE).to_dict()
        cycles = d["layout"]["meta"]["cycles"]
        assert [c["cycle"] for c in cycles] == ["2023 overhaul", "2025 seal change"]
        # a cycle lasts from its first run to the next cycle's first run
        assert cycles[0]["x0"].startswith("2023-04-18T07:42")
        assert cycles[0]["x1"] == cycles[1]["x0"] and cycles[1]["x0"].startswith("2025-06-03")
        rects = [s for s in d["layout"]["shapes"] if s["type"] == "rect"]
        assert len(rects) == 2 * len(cycles)  # one band per cycle in each panel
        labels = [a["text"] for a in d["layout"]["annotations"]]
        assert "cycle: 2023 overhaul" in labels and "cycle: 2025 seal change" in labels
        colour = {c["cycle"]: c["color"] for c in cycles}
        cycle_of = {r["id"]: r["cycle"] for r in all_four["runs"]}
        for t in d["data"]:
            assert list(t["marker"]["color"]) == [colour[cycle_of[r]] for r in t["customdata"]]
        assert colour["2023 overhaul"] != colour["2025 seal change"]

    def test_invented_runs_missing_values(self):
        """Invented comparison: an undated run is left out and named, a missing sigma
        draws no bar, a second critical gets its own trace."""
        def run(i, when, cycle, crits):
            return {"id": i, "label": f"r{i}", "cycle": cycle, "kind": "run-up",
                    "started_at": when, "estimates": [
                        {"probe": "P", "direction": "run-up", "criticals": [
                            {"speed_rpm": s, "speed_std_rpm": sd, "af": af, "af_std": None,
                             "n_found": 10, "n_boot": 10} for s, sd, af in crits]}]}
        comp = {"runs": [run(1, "2020-01-01T00:00:00+00:00", "A", [(1000.0, 2.0, 4.0),
                                                                    (3000.0, None, None)]),
                         run(2, "2021-01-01T00:00:00+00:00", "", [(990.0, 3.0, 5.0)]),
                         run(3, None, "A", [(1010.0, 1.0, 4.0)])]}
        d = figures.comparison_trend(comp, probe="P").to_dict()
        assert d["layout"]["meta"]["undated_runs"] == [3]
        assert [c["cycle"] for c in d["layout"]["meta"]["cycles"]] == ["A", "no cycle"]
        speed = [t for t in d["data"] if t["yaxis"] == "y"]
        assert [t["name"] for t in speed] == ["critical 1, run-up", "critical 2, run-up"]
        assert list(speed[0]["error_y"]["array"]) == [2.0, 3.0]
        assert list(speed[1]["error_y"]["array"]) == [None]

    def test_empty(self):
        d = figures.comparison_trend({"runs": []}, probe="P").to_dict()
        assert d["data"] == [] and d["layout"]["meta"]["cycles"] == []


class TestOverlay:
    def test_one_colour_per_run_direction_by_dash(self, demo_full, ups, cache):
        db, by_file = demo_full
        down = by_file["k410_2023_down.wav"]
        bode, polar = cp.overlay_figures(db, [ups[1], ups[0], down], PROBE, cache=cache)
        data = [t for t in bode.to_dict()["data"] if t.get("meta") == "data"]
        names = sorted({t["name"] for t in data})
        assert names == sorted([f"run {ups[0]} 1X run-up", f"run {down} 1X coast-down",
                                f"run {ups[1]} 1X run-up"])
        assert len(data) == 2 * 3  # amplitude and phase of each chosen run
        colour = {t["name"]: t["line"]["color"] for t in data}
        # reference-first order: the earliest run takes the palette's first colour
        assert colour[f"run {ups[0]} 1X run-up"] == figures.PALETTE[0]
        assert len(set(colour.values())) == 3
        dash = {t["name"]: t["line"]["dash"] for t in data}
        assert dash[f"run {down} 1X coast-down"] == figures.DIRECTION_STYLE["coast-down"]["dash"]
        assert dash[f"run {ups[0]} 1X run-up"] == figures.DIRECTION_STYLE["run-up"]["dash"]
        pdata = [t for t in polar.to_dict()["data"] if t.get("meta") == "data"]
        assert len(pdata) == 3
        assert "slow-roll compensated" in bode.layout.title.text

    def test_note_on_mixed_directions(self, demo_full, ups, cache):
        db, by_file = demo_full
        assert cp.selection_note(db, list(ups), cache=cache) == []
        note = cp.selection_note(db, [ups[0], by_file["k410_2023_down.wav"]], cache=cache)
        assert len(note) == 1 and "different directions" in note[0]
        assert "like with like" in note[0]
        assert "Tick two" in cp.selection_note(db, [ups[0]], cache=cache)[0]


class TestComparisonView:
    def test_other_probes_folded_and_a_long_fold_built_when_opened(self, demo_full, ups,
                                                                   cache, monkeypatch):
        db, _ = demo_full
        _, table, _ = cp.comparison_view(db, list(ups), PROBE, cache=cache)
        others = [r for r in cp.table_rows(cp.comparison_of(db, list(ups), cache=cache))
                  if r["probe"] != PROBE]
        assert others  # the demo has other probes with criticals
        body = _find(table, ids.COMPARE_OTHERS_BODY)
        assert len(body.children.children[1].children) == len(others)  # short: in the page
        assert cp.other_probes_table(db, list(ups), PROBE, cache=cache) is None
        monkeypatch.setattr(cp, "EAGER_ROWS", len(others) - 1)  # now it counts as long
        _, table, _ = cp.comparison_view(db, list(ups), PROBE, cache=cache)
        assert _find(table, ids.COMPARE_OTHERS_BODY).children == []
        built = cp.other_probes_table(db, list(ups), PROBE, cache=cache)
        assert _text(built) == _text(body)

    def test_table_shows_the_later_cycles_shift(self, demo_full, ups, cache):
        db, _ = demo_full
        trend, table, status = cp.comparison_view(db, [ups[1], ups[0]], PROBE, cache=cache)
        text = _text(table)
        rows = cp.table_rows(cp.comparison_of(db, list(ups), cache=cache), PROBE)
        assert len(rows) == 1 and rows[0]["runs"] == f"{ups[0]} → {ups[1]}"
        # scenario.json: the first critical of DE-X, steady-state peaks (about -3.4 %);
        # the swept runs read 8-16 rpm above them (Lewis 1932), so within 0.3 % points
        peaks = [min(SCENARIO["runs"][k]["probes"][PROBE]["peaks"], key=lambda p: p["peak_rpm"])
                 for k in ("2023_up", "2025_up")]
        true_pct = 100 * (peaks[1]["peak_rpm"] - peaks[0]["peak_rpm"]) / peaks[0]["peak_rpm"]
        shown = float(rows[0]["speed_shift"].split("(")[1].split(" %")[0])
        assert shown == pytest.approx(true_pct, abs=0.3)
        assert "(-3.3 %)" in text
        assert rows[0]["speed_sig"] == "significant" and rows[0]["af_sig"] == "significant"
        assert "hint: the critical speed moved down" in rows[0]["hints"]
        assert "Hints (not diagnoses)" in text and "not diagnoses" in text
        assert CAUTION in text
        assert f"reference: run {ups[0]}" in status and f"{cp.N_BOOT} bootstrap" in status
        # the trend holds both run-ups
        speed = next(t for t in trend.to_dict()["data"] if t["yaxis"] == "y")
        assert list(speed["customdata"]) == list(ups)

    def test_sigmas_in_the_table_are_the_comparisons(self, demo_full, ups, cache):
        db, _ = demo_full
        comp = cp.comparison_of(db, list(ups), cache=cache)
        m = next(p for p in comp["pairs"][0]["probes"] if p["probe"] == PROBE)["criticals"][0]
        row = cp.table_rows(comp, PROBE)[0]
        assert row["speed_shift"].startswith(f"{m['speed']['delta']:+,.1f} ± "
                                             f"{m['speed']['sigma']:.2g} rpm")
        assert row["af_b"] == f"{m['b']['af']:,.2f} ± {m['b']['af_std']:.2g}"

    def test_cached_per_runs_and_processing(self, demo_full, ups):
        db, _ = demo_full
        c = ResultCache(db)
        first = cp.comparison_of(db, list(ups), cache=c)
        hits = c.hits
        again = cp.comparison_of(db, [ups[1], ups[0]], cache=c)  # order does not matter
        assert again is first and c.hits > hits
        keys = [k for k in c._entries if k[0] == "comparison"]
        assert len(keys) == 1
        stamps = [c.stamp(r)[1] for r in ups]
        assert keys[0][2:] == tuple(stamps)  # run ids with their processing times

    def test_errors_are_visible(self, demo_full, ups, cache):
        db, _ = demo_full
        trend, table, status = cp.comparison_view(db, [ups[0], 9999], PROBE, cache=cache)
        assert getattr(table, "className", "") == "error" and "9999" in _text(table)
        assert "could not" in status and trend.to_dict()["data"] == []
        _, table, status = cp.comparison_view(db, [ups[0]], PROBE, cache=cache)
        assert "two or more" in _text(table) and status == "No comparison yet."


class TestLayout:
    def test_runs_newest_first_with_date_kind_cycle(self, demo_full, ups, cache):
        db, by_file = demo_full
        page = cp.layout(db, run_ids=list(ups), cache=cache)
        checklist = _find(page, ids.COMPARE_RUNS)
        assert checklist.value == list(ups)
        labels = [o["label"] for o in checklist.options]
        assert len(labels) == 4
        assert labels[0].startswith(f"run {by_file['k410_2025_trip.wav']} · 2025-06-03 09:30 · "
                                    "coast-down · cycle 2025 seal change")
        assert labels[-1].startswith(f"run {ups[0]} · 2023-04-18 07:42 · run-up · "
                                     "cycle 2023 overhaul")
        assert CAUTION in _text(page)
        assert _find(page, ids.COMPARE_TREND) is not None

    def test_default_selection_is_like_with_like(self, demo_full, cache):
        db, by_file = demo_full
        checklist = _find(cp.layout(db, cache=cache), ids.COMPARE_RUNS)
        assert checklist.value == [by_file["k410_2025_trip.wav"], by_file["k410_2023_down.wav"]]

    def test_machine_picker_moves_only_to_another_machine(self, demo_full, ups):
        db, _ = demo_full
        with db.read() as conn:
            mid = q.run_machine_id(conn, ups[0])
        assert cp.machine_path(db, mid, f"/compare/{ups[0]},{ups[1]}") is None
        assert cp.machine_path(db, mid, "/compare") is None
        assert cp.machine_path(db, mid + 1, "/compare") == f"/compare/machine/{mid + 1}"
        assert cp.machine_path(db, None, "/compare") is None

    def test_unknown_machine(self, demo_full):
        assert "no machine 99" in _text(cp.layout(demo_full[0], machine_id=99))

    def test_links_from_runs_and_review(self, demo_full, ups, cache):
        db, _ = demo_full
        assert "/compare/machine/" in str(runs.layout(db))
        page = review.layout(db, ups[1], cache=cache)
        assert cp.href([ups[1], ups[0]]) in str(page)  # this run and the earliest run-up
        assert _find(page, ids.REPORT_HTML) is not None and _find(page, ids.REPORT_PDF)


class TestReportDownload:
    def test_html(self, demo_full, ups):
        db, _ = demo_full
        data, status = reports.download(db, ups[1], ids.REPORT_HTML)
        assert data["filename"] == f"rundash-run-{ups[1]}-2025-06-03.html"
        assert data["base64"] and data["type"] == "text/html"
        page = base64.b64decode(data["content"]).decode("utf-8")
        assert page.lstrip().lower().startswith("<!doctype html")
        assert CAUTION in html.unescape(page)
        assert "ready" in _text(status)

    def test_reviewer_fields_and_the_previous_run(self, demo_full, ups):
        db, by_file = demo_full
        with db.read() as conn:
            later, earlier = q.get_run(conn, ups[1]), q.get_run(conn, ups[0])
        # the previous processed run-up of the machine, not the coast-downs between them
        assert reports.previous_same_kind(db, later).id == ups[0]
        assert reports.previous_same_kind(db, earlier) is None
        form = _text(reports.report_form(db, later))
        assert f"with the previous run-up of this machine: run {ups[0]} (2023-" in form
        assert "No earlier processed run-up" in _text(reports.report_form(db, earlier))
        data, status = reports.download(db, ups[1], ids.REPORT_HTML, reviewer=" A. Reviewer ",
                                        role="commissioning lead",
                                        decision="accepted with remarks",
                                        remarks="recheck DE-Y", compare=[ups[0]])
        page = html.unescape(base64.b64decode(data["content"]).decode("utf-8"))
        assert "A. Reviewer" in page and "commissioning lead" in page
        assert "recheck DE-Y" in page and 'class="box x"></span>accepted with remarks' in page
        # the comparison section, as rundash report --compare writes it
        assert "Comparison with other runs" in page and f"run {ups[0]}" in page
        assert "ready" in _text(status)

    def test_pdf(self, demo_full, ups):
        db, _ = demo_full
        data, status = reports.download(db, ups[1], ids.REPORT_PDF)
        assert data["type"] == "application/pdf"
        assert base64.b64decode(data["content"])[:5] == b"%PDF-"

    def test_missing_pdf_extra_is_an_alert(self, demo_full, ups, monkeypatch):
        import sys

        monkeypatch.setitem(sys.modules, "kaleido", None)  # the PDF extra not installed
        data, status = reports.download(demo_full[0], ups[1], ids.REPORT_PDF)
        assert data is None and status.className == "error" and status.role == "alert"
        assert "PDF output needs the PDF extra" in _text(status)

    def test_errors_become_an_alert(self, demo_full):
        db, _ = demo_full
        data, status = reports.download(db, 9999, ids.REPORT_HTML)
        assert data is None and status.className == "error" and "9999" in _text(status)
        assert reports.download(db, 1, "something else") == (None, None)

    def test_bad_format(self, demo_full):
        from rundash.errors import InputError

        with pytest.raises(InputError, match="Invalid value for 'format'"):
            reports.build_report(demo_full[0], 1, "docx")


def test_nothing_recomputed_on_the_page(demo_full, ups):
    """The overlay reads stored tracks only: equal to the stored arrays."""
    db, _ = demo_full
    bode, _ = cp.overlay_figures(db, [ups[0], ups[1]], PROBE)
    with db.read() as conn:
        stored = next(t for t in q.load_tracks(conn, ups[0], order=1.0, probe_name=PROBE)
                      if t.compensated)
    amp = _arr(next(t for t in bode.to_dict()["data"]
                    if t["name"] == f"run {ups[0]} 1X run-up")["y"])
    amp = amp[np.isfinite(amp)]
    assert np.nanmax(amp) == pytest.approx(float(np.max(stored.amplitude)), rel=1e-12)
