"""Page logic called directly with plain values, as the callbacks call it (no browser)."""

from __future__ import annotations

import base64

import numpy as np
import pytest
from numpy.testing import assert_allclose

from rundash import CAUTION
from rundash.dashboard import ids
from rundash import presentation
from rundash.dashboard.pages import importer, review, runs
from rundash.errors import InputError
from rundash.units import UM_PER_MIL


def _arr(v):
    if isinstance(v, dict) and "bdata" in v:
        return np.frombuffer(base64.b64decode(v["bdata"]), dtype=np.dtype(v["dtype"]))
    return np.asarray(v)


def _text(component) -> str:
    """All text of a Dash component tree."""
    if component is None:
        return ""
    if isinstance(component, (str, int, float)):
        return str(component)
    if isinstance(component, (list, tuple)):
        return " ".join(_text(c) for c in component)
    out = [_text(getattr(component, "children", None))]
    data = getattr(component, "data", None)
    if isinstance(data, list):
        out += [" ".join(str(v) for v in row.values()) for row in data]
    return " ".join(out)


def _find(component, id_):
    """The component with ``id`` in a Dash component tree (None when absent)."""
    if getattr(component, "id", None) == id_:
        return component
    kids = getattr(component, "children", None)
    for k in kids if isinstance(kids, (list, tuple)) else [kids]:
        if k is not None and not isinstance(k, (str, int, float)):
            hit = _find(k, id_)
            if hit is not None:
                return hit
    return None


class TestRoutes:
    def test_match(self):
        assert runs.match("/") == {}
        assert review.match("/run/12") == {"run_id": 12}
        assert review.match("/run/x") is None
        assert importer.match("/import") == {}


class TestRunsPage:
    def test_lists_the_run_with_its_verdict(self, demo_db):
        text = _text(runs.layout(demo_db.db))
        assert "First start (test)" in text and "2023 overhaul" in text
        assert "fail" in text and "processed" in text  # the fixture's run verdict

    def test_badge_words(self):
        assert _text(runs.verdict_badge(None, False)) == "not processed"
        assert _text(runs.verdict_badge(None, True)) == "no findings yet"
        assert "fail" in runs.verdict_badge("fail", True).className


class TestReview:
    def test_verdict_panel_opens_on_findings_and_caution(self, demo_db):
        ctx = review.load_context(demo_db.db, demo_db.run_id)
        text = _text(review.verdict_panel(ctx))
        assert "Critical speeds found (3)" in text
        assert "12.1 %" in text and "3,500" in text
        assert "test warning" in text
        assert CAUTION in text

    def test_many_reference_rows_built_when_opened(self, demo_db):
        """A fold of more than EAGER_ROWS reference-only rows comes empty with the page
        and is built by the fold's first opening (layout.reference_limits_table, what the
        callback returns); a short fold keeps its rows in the page."""
        import importlib

        lay = importlib.import_module("rundash.dashboard.pages.review.layout")

        ctx = review.load_context(demo_db.db, demo_db.run_id)
        f = ctx["findings"]
        ref = [r for r in f["limits"] if r["verdict"] == "reference only"]
        many = dict(f, limits=[dict(ref[i % len(ref)], speed_rpm=3000.0 + i)
                               for i in range(lay.EAGER_ROWS + 10)] + f["limits"])
        panel = review.verdict_panel(dict(ctx, findings=many))
        body = _find(panel, ids.LIMITS_REFERENCE_BODY)
        assert body.children == []
        assert f"{lay.EAGER_ROWS + 12} reference-only rows" in _text(_find(panel, ids.LIMITS_REFERENCE))
        kinds = lay.probe_kinds(ctx)
        table = lay.reference_limits_table(many, "metric", kinds)
        assert len(table.children[1].children) == lay.EAGER_ROWS + 12
        assert _text(table).count("reference only") == lay.EAGER_ROWS + 12
        assert lay.reference_limits_table(f, "metric", kinds) is None  # 2 rows: in the page

    def test_judged_limits_first_reference_rows_folded(self, demo_db):
        ctx = review.load_context(demo_db.db, demo_db.run_id)
        panel = review.verdict_panel(ctx)
        judged = _find(panel, ids.LIMITS_TABLE)
        rows = judged.children[1].children
        assert [r.children[8].children for r in rows] == ["exceeds", "within"]
        assert "row-fail" in getattr(rows[0], "className", "") \
            and not getattr(rows[1], "className", "")
        fold = _find(panel, ids.LIMITS_REFERENCE)
        assert not getattr(fold, "open", False)  # folded
        assert "2 reference-only rows" in _text(fold.children[0])
        ref = _text(_find(panel, ids.LIMITS_REFERENCE_BODY))
        assert ref.count("reference only") == 2 and "exceeds" not in ref
        text = _text(panel)
        assert "Vibration limit checks: 2 judged, 1 exceed; 2 for reference" in text
        # what fails, in words: 30.48 um = 1.2 mil exactly (1 mil = 25.4 um)
        reasons = _text(_find(panel, ids.VERDICT_REASONS))
        assert "K410-DE-Y" in reasons and "30.5 µm pp" in reasons and "25.4 µm pp" in reasons
        assert "1.2 mil pp" in _text(review.verdict_panel(ctx, "imperial")
                                     .children[2])

    def test_side_margins_rising_directions_and_warnings(self, demo_db):
        ctx = review.load_context(demo_db.db, demo_db.run_id)
        rows = review.critical_rows(ctx["findings"])
        assert rows[0]["side"] == "below N_min (4,400 rpm)"
        assert rows[0]["margin"] == "20.5 % below"  # 100 (4400 - 3500) / 4400
        assert rows[0]["required"] == "12.1 % below"
        assert rows[0]["peak"] == "50.8 µm pp"
        panel = review.verdict_panel(ctx)
        rising = _text(_find(panel, ids.RISING_AT_TOP))
        assert "K410-NDE-Y run-up" in rising and "not judged" in rising
        assert "3,430" in _text(_find(panel, ids.DIRECTIONS_TABLE))
        warnings = _text(_find(panel, ids.WARNINGS))
        assert "test warning" in warnings and "test note" not in warnings  # said once
        assert "1 exceed" in _text(_find(panel, ids.VERDICT_SUMMARY))
        assert CAUTION in _text(panel)

    def test_findings_units_with_micro_sign_convert(self):
        # the findings write 'µm pp'; 1 mil = 25.4 um exactly
        assert presentation.amplitude(50.8, "proximity", "pp", "imperial") == "2 mil pp"

    def test_verdict_panel_without_findings(self, demo_db):
        ctx = dict(review.load_context(demo_db.db, demo_db.run_id), findings=None)
        text = _text(review.verdict_panel(ctx))
        assert "no findings yet" in text and CAUTION in text

    def test_amplitudes_in_imperial(self):
        # 1 mil = 25.4 um exactly
        assert presentation.amplitude(50.8, "proximity", "pp", "imperial") == "2 mil pp"
        assert presentation.amplitude(25.4, "velocity", "pk", "imperial") == "1 in/s pk"

    def test_vector_figures_mark_criticals_of_the_probe(self, demo_db):
        bode, polar, direct = review.vector_figures(demo_db.db, demo_db.run_id, "K410-DE-X",
                                                    [1.0, 2.0], "compensated", "metric")
        d = bode.to_dict()
        (m,) = [t for t in d["data"] if t.get("name") == "critical speeds"]
        assert_allclose(_arr(m["x"]), [3500.0])
        names = {t["name"] for t in d["data"] if t.get("meta") == "data"}
        assert {"K410-DE-X 1X run-up", "K410-DE-X 2X run-up"} <= names
        assert "slow-roll compensated" in d["layout"]["title"]["text"]
        assert [t for t in polar.to_dict()["data"] if t.get("name") == "critical speeds"]
        lim = [t for t in direct.to_dict()["data"] if t.get("meta") == "limit"]
        assert lim  # API 617-style limit and ISO reference zones

    def test_units_switch_and_uncompensated(self, demo_db):
        a = review.vector_figures(demo_db.db, demo_db.run_id, "K410-DE-X", [1.0],
                                  "uncompensated", "metric")[0].to_dict()
        b = review.vector_figures(demo_db.db, demo_db.run_id, "K410-DE-X", [1.0],
                                  "uncompensated", "imperial")[0].to_dict()
        assert b["layout"]["yaxis"]["title"]["text"] == "amplitude (mil pp)"
        assert_allclose(_arr(b["data"][0]["y"]) * UM_PER_MIL, _arr(a["data"][0]["y"]))
        assert "uncompensated" in a["layout"]["title"]["text"]
        assert a["layout"]["uirevision"] != b["layout"]["uirevision"]

    def test_velocity_probe_has_no_compensation(self, demo_db):
        bode = review.vector_figures(demo_db.db, demo_db.run_id, "K410-DE-VEL", [1.0],
                                     "compensated", "metric")[0].to_dict()
        assert "uncompensated" in bode["layout"]["title"]["text"]
        assert bode["layout"]["yaxis"]["title"]["text"] == "amplitude (mm/s pk)"

    def test_speed_cascade_campbell(self, demo_db):
        s = review.speed_figure(demo_db.db, demo_db.run_id, "K410-DE-X").to_dict()
        assert "time inside critical bands" in " ".join(a["text"] for a in s["layout"]["annotations"])
        c = review.cascade_figure(demo_db.db, demo_db.run_id, "K410-DE-X", "metric").to_dict()
        assert c["data"][0]["type"] == "heatmap"
        fig, note = review.campbell_figure(demo_db.db, demo_db.run_id, "41.5, x, -3")
        assert "'x'" in note and "'-3'" in note
        pts = [t for t in fig.to_dict()["data"] if t.get("name") == "interference points"][0]
        assert_allclose(np.sort(_arr(pts["x"])), np.sort([60 * 41.5 / n for n in (1, 2, 3, 4)]))

    def test_orbit_applies_mounting_angles(self, demo_db):
        fig, note = review.orbit_figure(demo_db.db, demo_db.run_id, "K410-DE-X|K410-DE-Y", 3000,
                                        "run-up", "metric")
        d = fig.to_dict()
        assert "315°" in note and "45°" in note and "applied" in note
        assert d["layout"]["meta"]["sense"] in ("forward", "reverse")
        assert [t for t in d["data"] if t.get("meta") == "raw"]
        assert abs(float(note.split(" rpm (nearest")[0].split()[-1]) - 3000) < 50

    def test_evidence_panel_and_click(self, demo_db):
        f = review.load_context(demo_db.db, demo_db.run_id)["findings"]
        text = _text(review.evidence_panel(f, 0))
        assert "AF half-power" in text and "5.00" in text and "phase lag rises" in text
        assert review.evidence_panel(f, 99) == ""
        click = {"points": [{"customdata": [0, 3520.0]}]}
        assert review.critical_index_from_click(f, click) == 1
        assert review.critical_index_from_click(f, {"points": [{"customdata": 3.0}]}) is None

    def test_orbit_pairs(self, demo_db):
        ctx = review.load_context(demo_db.db, demo_db.run_id)
        assert review.orbit_pairs(ctx["probes"]) == [("K410-DE-X", "K410-DE-Y"),
                                                     ("K410-NDE-X", "K410-NDE-Y")]


class TestImport:
    def test_sanitise(self):
        assert importer.sanitise_filename("../../etc/passwd") == "passwd"
        assert importer.sanitise_filename("C:\\data\\run 1 (copy).wav") == "run_1_copy_.wav"
        assert importer.sanitise_filename("..") == "upload.dat"
        assert len(importer.sanitise_filename("a" * 300 + ".wav")) <= 100

    def test_decode_upload_cap_and_errors(self):
        url = "data:application/octet-stream;base64," + base64.b64encode(b"x" * 100).decode()
        assert importer.decode_upload(url, what="file", max_bytes=100) == b"x" * 100
        with pytest.raises(InputError, match="larger than the limit"):
            importer.decode_upload(url, what="file", max_bytes=50)
        with pytest.raises(InputError, match="no file uploaded"):
            importer.decode_upload(None, what="file", max_bytes=50)
        with pytest.raises(InputError, match="not valid base64"):
            importer.decode_upload("data:x;base64,@@@", what="file", max_bytes=50)

    def test_parse_started(self):
        assert importer.parse_started("2025-06-03 06:15").isoformat() == "2025-06-03T06:15:00+00:00"
        assert importer.parse_started("") is None
        with pytest.raises(InputError, match="Invalid value for 'started'"):
            importer.parse_started("yesterday")

    def test_start_refuses_bad_form(self, demo_db):
        jobs = importer.ImportJobs(demo_db.db)
        job, err = importer.start_import(jobs, demo_db.db, data_contents=None, data_name="a.exe",
                                         machine_source="upload", machine_contents=None,
                                         label="", cycle="", kind="mixed", started="")
        assert job is None and "Invalid value for 'data file'" in err

    def test_import_job_lands_a_run_and_refuses_a_duplicate(self, demo_db, tmp_path):
        from rundash.storage import queries as q
        from rundash.storage.engine import open_database

        db = open_database(str(tmp_path / "imp.sqlite"), create=True)
        try:
            jobs = importer.ImportJobs(db)
            data = (demo_db.folder / "k410_2025_trip.wav").read_bytes()
            kw = dict(filename="trip test.wav", data=data, description_text=demo_db.desc_text,
                      label="trip", cycle="2025", kind="mixed", started_at=None, process=True)
            st = jobs.run_sync(**kw)
            assert st.error is None and st.done and st.run_id is not None
            with db.read() as conn:
                assert [r.label for r in q.list_runs(conn)] == ["trip"]
                assert q.load_processing(conn, st.run_id) is not None
            line, pct, result, more = importer.status_view(st)
            assert pct == "100%" and not more and "Review run" in _text(result)
            st2 = jobs.run_sync(**kw)
            assert st2.stage == "refused" and st2.error
        finally:
            db.dispose()

    def test_machine_description_from_stored_machine(self, demo_db):
        text, where = importer.machine_description_text(demo_db.db, "machine:1", None)
        assert "Tarnwick" in text and "run" in where
