"""A few smoke tests of the real server in headless Chromium (dash's ``dash_duo``).

Screenshots go to artifacts/ (ignored by git). The console must log no errors.
"""

from __future__ import annotations

import pytest

from rundash import CAUTION
from rundash.dashboard import ids
from rundash.dashboard.app import create_app
from tests.dashboard.conftest import ARTIFACTS

# a missing Chromium or chromedriver fails these tests in one line (tests/conftest.py)
pytestmark = pytest.mark.browser

_TRACES = "return document.querySelector('#%s .js-plotly-plot').data.map(t => t.name);"


def _shot(dash_duo, name):
    ARTIFACTS.mkdir(exist_ok=True)
    dash_duo.driver.save_screenshot(str(ARTIFACTS / f"{name}.png"))


def _click(dash_duo, selector):
    el = dash_duo.find_element(selector)
    # the caution bar stays at the bottom of the window: bring the element to the middle
    dash_duo.driver.execute_script("arguments[0].scrollIntoView({block: 'center'});", el)
    el.click()


def _severe(dash_duo):
    return [e for e in dash_duo.get_logs() or [] if e.get("level") == "SEVERE"]


def test_review_workflow(dash_duo, demo_db):
    from dash.testing.wait import until
    from selenium.webdriver.common.action_chains import ActionChains

    app = create_app(demo_db.db)
    dash_duo.start_server(app)
    dash_duo.wait_for_text_to_equal(".brand", "rundash")
    dash_duo.wait_for_contains_text(f"#{ids.RUNS_TABLE}", "First start (test)", timeout=10)
    _shot(dash_duo, "runs")

    dash_duo.find_element(f"#{ids.RUNS_TABLE} a[href='/run/{demo_db.run_id}']").click()
    dash_duo.wait_for_contains_text(f"#{ids.VERDICT_PANEL}", "Critical speeds found (3)",
                                    timeout=10)
    dash_duo.wait_for_element(f"#{ids.BODE} .js-plotly-plot", timeout=15)
    names = dash_duo.driver.execute_script(_TRACES % ids.BODE)
    assert "critical speeds" in names
    x = dash_duo.driver.execute_script(
        "const d = document.querySelector('#%s .js-plotly-plot').data;"
        "return Array.from(d.find(t => t.name === 'critical speeds').x);" % ids.BODE)
    assert x == [3500.0]
    # the verdict says what fails; judged limit rows first, the failing one marked
    dash_duo.wait_for_contains_text(f"#{ids.VERDICT_REASONS}", "K410-DE-Y", timeout=10)
    first = dash_duo.find_element(f"#{ids.LIMITS_TABLE} tbody tr")
    assert "row-fail" in first.get_attribute("class") and "exceeds" in first.text
    # reference-only rows folded with their count, drawn when opened
    fold = dash_duo.find_element(f"#{ids.LIMITS_REFERENCE}")
    assert fold.get_attribute("open") is None
    assert "2 reference-only rows" in fold.find_element("css selector", "summary").text
    assert "Side (margin from)" in dash_duo.find_element(f"#{ids.CRITICALS_TABLE}").text
    assert "below N_min (4,400 rpm)" in dash_duo.find_element(f"#{ids.CRITICALS_TABLE}").text
    assert "not judged" in dash_duo.find_element(f"#{ids.RISING_AT_TOP}").text
    assert CAUTION in dash_duo.find_element(f"#{ids.CAUTION_BAR}").text
    dash_duo.driver.set_window_size(1400, 2600)
    _shot(dash_duo, "review")
    dash_duo.driver.set_window_size(1400, 1000)
    _click(dash_duo, f"#{ids.LIMITS_REFERENCE} summary")
    until(lambda: fold.get_attribute("open") is not None, timeout=10)
    assert "reference only" in dash_duo.find_element(f"#{ids.LIMITS_REFERENCE_BODY}").text
    _shot(dash_duo, "review-reference-rows")

    # Bode phase: unwrapped by default (no fixed 0-360 range), wrapped on request
    layout2 = ("const l = document.querySelector('#%s .js-plotly-plot').layout.yaxis2;"
               "return l.autorange === true || !l.range ? 'auto' : l.range;" % ids.BODE)
    assert dash_duo.find_element(f"#{ids.PHASE} input[value='unwrapped']").is_selected()
    assert dash_duo.driver.execute_script(layout2) == "auto"
    _click(dash_duo, f"#{ids.PHASE} input[value='wrapped']")
    until(lambda: dash_duo.driver.execute_script(layout2) == [0, 360], timeout=10)
    _click(dash_duo, f"#{ids.PHASE} input[value='unwrapped']")
    until(lambda: dash_duo.driver.execute_script(layout2) == "auto", timeout=10)

    # linked cursor: a hover on the Bode plot marks the same speed on the polar plot

    area = dash_duo.find_element(f"#{ids.BODE} .nsewdrag")
    dash_duo.driver.execute_script("arguments[0].scrollIntoView({block: 'center'});", area)
    ActionChains(dash_duo.driver).move_to_element(area).move_by_offset(10, 5).perform()

    until(lambda: dash_duo.driver.execute_script(
        "const d = document.querySelector('#%s .js-plotly-plot').data;"
        "const c = d.find(t => t.meta === 'cursor'); return c.r && c.r.length;" % ids.POLAR)
        == 1, timeout=10)

    # switch probe: the Bode shows the other probe's critical
    _click(dash_duo, f"#{ids.PROBE} input[value='K410-DE-Y']")
    dash_duo.wait_for_contains_text(f"#{ids.BODE} .gtitle", "K410-DE-Y", timeout=10)
    # switch units
    _click(dash_duo, f"#{ids.UNITS} input[value='imperial']")
    dash_duo.wait_for_contains_text(f"#{ids.BODE} .ytitle", "mil pp", timeout=10)
    dash_duo.wait_for_contains_text(f"#{ids.VERDICT_PANEL}", "mil pp", timeout=10)
    # a click on a critical row opens its evidence
    _click(dash_duo, f"#{ids.CRITICALS_TABLE} tbody tr")
    dash_duo.wait_for_contains_text(f"#{ids.EVIDENCE}", "AF half-power", timeout=10)
    _shot(dash_duo, "review-imperial")
    assert _severe(dash_duo) == []


def test_import_page_lands_a_run(dash_duo, demo_db):
    app = create_app(demo_db.db)
    dash_duo.start_server(app)
    dash_duo.driver.get(dash_duo.server_url + "/import")
    dash_duo.wait_for_element(f"#{ids.UPLOAD_DATA} input[type=file]", timeout=10)
    path = demo_db.folder / "k410_2023_down.wav"
    dash_duo.find_element(f"#{ids.UPLOAD_DATA} input[type=file]").send_keys(str(path))
    dash_duo.wait_for_contains_text(f"#{ids.UPLOAD_DATA_NAME}", "k410_2023_down.wav",
                                    timeout=10)
    dash_duo.find_element(f"#{ids.LABEL}").send_keys("Uploaded coast-down")
    _click(dash_duo, f"#{ids.START}")
    dash_duo.wait_for_contains_text(f"#{ids.RESULT}", "Review run", timeout=40)
    _shot(dash_duo, "import-done")
    _click(dash_duo, f"#{ids.RESULT} a")
    dash_duo.wait_for_contains_text(f"#{ids.VERDICT_PANEL}", "Verdict", timeout=10)
    dash_duo.driver.get(dash_duo.server_url + "/")
    dash_duo.wait_for_contains_text(f"#{ids.RUNS_TABLE}", "Uploaded coast-down", timeout=10)
    assert _severe(dash_duo) == []
