"""Screens that cannot mislead, on the review page's builders (no browser): X and Y of one
bearing on one Bode, mounting angles in both forms, the direct plot's one convention."""

from __future__ import annotations

import numpy as np

from rundash.dashboard.pages.review import data as rd
from rundash.dashboard.pages.review.layout import layout
from tests.dashboard.test_callbacks import _arr, _find


def _data_names(fig):
    return [t["name"] for t in fig.to_dict()["data"] if t.get("meta") == "data"]


def test_x_and_y_of_one_bearing_on_one_bode(demo_db):
    one = rd.bode_figure(demo_db.db, demo_db.run_id, "K410-DE-X", [1.0], "compensated",
                         "metric")
    both = rd.bode_figure(demo_db.db, demo_db.run_id, "K410-DE-X", [1.0], "compensated",
                          "metric", with_pair=True)
    n1, n2 = _data_names(one), _data_names(both)
    assert all(n.startswith("K410-DE-X") for n in n1)
    assert any(n.startswith("K410-DE-Y 1X") for n in n2) and set(n1) < set(n2)
    d = both.to_dict()
    colours = {t["name"].split()[0]: t["line"]["color"] for t in d["data"]
               if t.get("meta") == "data"}
    assert colours["K410-DE-X"] != colours["K410-DE-Y"]  # told apart by colour and name
    assert "K410-DE-X and K410-DE-Y" in d["layout"]["title"]["text"]
    # both probes' criticals marked (the test findings: 3,500 and 3,520 rpm)
    crit = next(t for t in d["data"] if t.get("name") == "critical speeds")
    assert sorted(_arr(crit["x"])) == [3500.0, 3520.0]
    # the partner either way round; a probe with no pair has none
    probes = rd.load_context(demo_db.db, demo_db.run_id)["probes"]
    assert rd.pair_partner(probes, "K410-DE-Y") == "K410-DE-X"
    assert rd.pair_partner(probes, "K410-DE-VEL") is None


def test_probe_angles_in_both_forms(demo_db):
    # the demo machine: rotation ccw, once-per-rev sensor at the top, DE-X at 315° from
    # it, i.e. 45° right of top dead centre viewed from the driver end (ccw turns left)
    page = layout(demo_db.db, demo_db.run_id)
    opts = {o["value"]: o["title"] for o in _find(page, "review-probe").options}
    assert "mounted at 45° R (315° from the once-per-rev sensor)" in opts["K410-DE-X"]
    assert "mounted at 45° L (45° from the once-per-rev sensor)" in opts["K410-DE-Y"]
    assert "axis none" not in opts["K410-DE-VEL"]


def test_direct_plot_velocity_one_convention(demo_db):
    _, direct = rd.polar_direct_figures(demo_db.db, demo_db.run_id, "K410-DE-VEL",
                                        "compensated", "metric")
    d = direct.to_dict()
    assert d["layout"]["yaxis"]["title"]["text"] == "amplitude (mm/s rms; 1X as rms)"
    one_x = next(t for t in d["data"] if t.get("name", "").endswith("1X (rms = pk/√2)"))
    direct_tr = next(t for t in d["data"] if t.get("name", "").endswith("direct"))
    # the 1X rms is part of the overall rms: never above it (Parseval; common practice)
    a, b = _arr(one_x["y"]), _arr(direct_tr["y"])
    ok = np.isfinite(a) & np.isfinite(b)
    assert np.all(a[ok] <= b[ok])


def test_review_page_pair_and_imperial_in_the_browser(dash_duo, demo_db):
    """Headless Chromium: X and Y of one bearing on one Bode from the checkbox; imperial
    mode changes the direct plot's limit legend too; the tab names the page."""
    from rundash.dashboard import ids
    from rundash.dashboard.app import create_app
    from tests.dashboard.test_browser import _click, _severe, _shot

    dash_duo.start_server(create_app(demo_db.db))
    dash_duo.wait_for_page(url=f"{dash_duo.server_url}/run/{demo_db.run_id}", timeout=20)
    dash_duo.wait_for_element(f"#{ids.BODE} .js-plotly-plot", timeout=20)
    assert dash_duo.driver.title == f"Run review · run {demo_db.run_id} · rundash"
    _click(dash_duo, f"#{ids.BODE_PAIR} input")
    dash_duo.wait_for_contains_text(f"#{ids.BODE} .gtitle", "K410-DE-X and K410-DE-Y",
                                    timeout=20)
    names = dash_duo.driver.execute_script(
        "return document.querySelector('#%s .js-plotly-plot').data"
        ".filter(t => t.meta === 'data').map(t => t.name);" % ids.BODE)
    assert any(n.startswith("K410-DE-Y 1X") for n in names)
    _click(dash_duo, f"#{ids.UNITS} input[value='imperial']")
    dash_duo.wait_for_contains_text(f"#{ids.DIRECT} .ytitle", "mil pp", timeout=20)
    texts = dash_duo.driver.execute_script(
        "const g = document.querySelector('#%s .js-plotly-plot');"
        "return g.data.map(t => t.name || '').concat("
        "(g.layout.annotations || []).map(a => a.text || ''));" % ids.DIRECT)
    limits = [t for t in texts if t.startswith("Unfiltered")]
    assert limits and all("mil pp" in t and "µm" not in t for t in limits), limits
    _shot(dash_duo, "review-pair-imperial")
    assert _severe(dash_duo) == []
