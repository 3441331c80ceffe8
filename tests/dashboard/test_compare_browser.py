"""The compare page and the report download in headless Chromium (dash's ``dash_duo``).

Demo database (rundash.workflows.demo.build_demo); the later cycle's first critical is about 3.3 %
lower on DE-X (sample_runs/scenario.json: -3.4 % at steady state). Screenshots go to
artifacts/ (ignored by git). The console must log no errors.
"""

from __future__ import annotations

import os

import pytest

from rundash import CAUTION
from rundash.dashboard import ids
from rundash.dashboard.app import create_app
from tests.dashboard.test_browser import _click, _severe, _shot
from tests.dashboard.test_compare_page import demo_full, ups  # noqa: F401  (fixtures)

# a missing Chromium or chromedriver fails these tests in one line (tests/conftest.py)
pytestmark = pytest.mark.browser

_TREND = ("const d = document.querySelector('#%s .js-plotly-plot').data"
          ".filter(t => t.meta === 'trend' && t.yaxis === 'y');"
          "return d.map(t => [t.name, Array.from(t.customdata), Array.from(t.error_y.array)]);"
          % ids.COMPARE_TREND)


def test_compare_and_download(dash_duo, demo_full, ups):  # noqa: F811
    from dash.testing.wait import until

    db, by_file = demo_full
    dash_duo.start_server(create_app(db))
    dash_duo.driver.get(dash_duo.server_url + f"/compare/{ups[0]},{ups[1]}")
    dash_duo.wait_for_contains_text(f"#{ids.COMPARE_STATUS}", "Compared 2 runs", timeout=30)
    dash_duo.wait_for_contains_text(f"#{ids.COMPARE_TABLE}", "(-3.3 %)", timeout=10)
    table = dash_duo.find_element(f"#{ids.COMPARE_TABLE}").text
    assert "significant" in table and "moved down" in table and CAUTION in table
    # the trend: the two run-ups, each with its error bar
    until(lambda: dash_duo.driver.execute_script(_TREND), timeout=10)
    trend = dash_duo.driver.execute_script(_TREND)
    assert [t[0] for t in trend] == ["critical 1, run-up"]
    assert trend[0][1] == list(ups) and len(trend[0][2]) == 2 and all(e > 0 for e in trend[0][2])
    assert dash_duo.find_elements(f"#{ids.COMPARE_TREND} .errorbar")
    names = dash_duo.driver.execute_script(
        "return document.querySelector('#%s .js-plotly-plot').data"
        ".filter(t => t.meta === 'data').map(t => t.name);" % ids.COMPARE_BODE)
    assert f"run {ups[0]} 1X run-up" in names and f"run {ups[1]} 1X run-up" in names
    dash_duo.driver.set_window_size(1400, 2400)
    _shot(dash_duo, "compare")
    dash_duo.driver.set_window_size(1400, 1000)

    # mixing directions says so
    down = by_file["k410_2023_down.wav"]
    _click(dash_duo, f"#{ids.COMPARE_RUNS} input[value='{down}']")
    dash_duo.wait_for_contains_text(f"#{ids.COMPARE_NOTE}", "different directions", timeout=10)

    # the review page's HTML download lands a file
    dash_duo.driver.get(dash_duo.server_url + f"/run/{ups[1]}")
    dash_duo.wait_for_element(f"#{ids.REPORT_HTML}", timeout=10)
    # the per-bearing split views are folded, built and drawn when first opened
    split = dash_duo.find_element(f"#{ids.SPLIT_VIEWS}")
    assert split.get_attribute("open") is None
    assert not dash_duo.find_elements(f"#{ids.SPLIT_VIEWS_BODY} .split-view")
    _click(dash_duo, f"#{ids.SPLIT_VIEWS_SUMMARY}")
    dash_duo.wait_for_element(f"#{ids.SPLIT_VIEWS_BODY} .split-view .main-svg", timeout=15)
    # the demo machine's two bearings, each with an X/Y pair (sample_runs/tarnwick-k410.toml)
    assert len(dash_duo.find_elements(f"#{ids.SPLIT_VIEWS_BODY} .split-view")) == 2
    _click(dash_duo, f"#{ids.REPORT_HTML}")
    dash_duo.wait_for_contains_text(f"#{ids.REPORT_STATUS}", "ready", timeout=30)
    name = f"rundash-run-{ups[1]}-2025-06-03.html"
    path = os.path.join(dash_duo.download_path, name)
    until(lambda: os.path.isfile(path) and os.path.getsize(path) > 100_000, timeout=20)
    with open(path, encoding="utf-8") as fh:
        assert fh.read(15).lower() == "<!doctype html>"
    _shot(dash_duo, "review-download")
    assert _severe(dash_duo) == []


def test_report_with_reviewer_fields_and_pdf_alert(dash_duo, demo_full, ups, monkeypatch):  # noqa: F811
    """The review page's report form: the reviewer's fields and the comparison with the
    previous run-up land in the downloaded file; without the PDF extra the PDF button
    shows one visible line saying so."""
    import sys

    from dash.testing.wait import until

    db, _ = demo_full
    dash_duo.start_server(create_app(db))
    dash_duo.driver.get(dash_duo.server_url + f"/run/{ups[1]}")
    dash_duo.wait_for_element(f"#{ids.REPORT_REVIEWER}", timeout=15)
    dash_duo.find_element(f"#{ids.REPORT_REVIEWER}").send_keys("B. Adeyemi")
    dash_duo.find_element(f"#{ids.REPORT_ROLE}").send_keys("machinery engineer")
    dash_duo.find_element(f"#{ids.REPORT_REMARKS}").send_keys("second critical to watch")
    dash_duo.select_dcc_dropdown(f"#{ids.REPORT_DECISION}", value="accepted with remarks")
    assert dash_duo.find_element(f"#{ids.REPORT_COMPARE} input").is_selected()
    assert f"run {ups[0]}" in dash_duo.find_element(f"#{ids.REPORT_COMPARE_NOTE}").text
    _shot(dash_duo, "review-report-form")
    _click(dash_duo, f"#{ids.REPORT_HTML}")
    dash_duo.wait_for_contains_text(f"#{ids.REPORT_STATUS}", "ready", timeout=60)
    path = os.path.join(dash_duo.download_path, f"rundash-run-{ups[1]}-2025-06-03.html")
    until(lambda: os.path.isfile(path) and os.path.getsize(path) > 100_000, timeout=20)
    with open(path, encoding="utf-8") as fh:
        page = fh.read()
    for words in ("B. Adeyemi", "machinery engineer", "second critical to watch",
                  'class="box x"></span>accepted with remarks', "Comparison with other runs"):
        assert words in page, words

    monkeypatch.setitem(sys.modules, "kaleido", None)  # the server runs in this process
    _click(dash_duo, f"#{ids.REPORT_PDF}")
    dash_duo.wait_for_element(f"#{ids.REPORT_ALERT}", timeout=30)
    alert = dash_duo.find_element(f"#{ids.REPORT_ALERT}")
    assert alert.is_displayed() and alert.get_attribute("role") == "alert"
    assert alert.text.startswith("The PDF report could not be made: PDF output needs the "
                                 "PDF extra") and len(alert.text.splitlines()) == 1
    _shot(dash_duo, "review-report-pdf-alert")
    assert _severe(dash_duo) == []
