"""The review workflow in headless Chromium against the real Dash server on a real SQLite
file: accept, reject and correct changing the verdict; a critical added by clicking the
Bode plot; an annotation on the plot and in the report; the sign-off on the runs page, in
the JSON and the report; re-processing a signed run; deleting a run.

The verdicts follow the API 617-style rule of DEVELOPERS.md, Reference values (from
memory): K410-DE-Y at 5,000 rpm lies inside the operating range 4,400-5,460 rpm and fails
outright; K410-DE-X corrected to 4,300 rpm with AF 5 has 100 (4400 - 4300)/4400 = 2.3 %
below N_min against the 12.143 % required, and fails.
"""

from __future__ import annotations

import json

import pytest

from rundash.cli import main
from rundash.dashboard import ids
from rundash.dashboard.app import create_app
from rundash.report import write_report
from rundash.workflows import review as wr
from tests.dashboard.test_browser import _click, _shot
from tests.review.conftest import reviewed, reviewed_source  # noqa: F401 (fixtures)

pytestmark = pytest.mark.browser


def _type(dash_duo, selector, text):
    el = dash_duo.find_element(selector)
    dash_duo.driver.execute_script("arguments[0].scrollIntoView({block: 'center'});", el)
    dash_duo.clear_input(el)  # a React input keeps its value through el.clear()
    el.send_keys(text)


def _radio(dash_duo, id_, value):
    _click(dash_duo, f"#{id_} input[value='{value}']")


def _open(dash_duo, reviewed):
    dash_duo.start_server(create_app(reviewed.db))
    dash_duo.wait_for_text_to_equal(".brand", "rundash")
    dash_duo.driver.get(dash_duo.server_url + f"/run/{reviewed.run_id}")
    dash_duo.wait_for_element(f"#{ids.REVIEW_CARD}", timeout=15)
    dash_duo.wait_for_element(f"#{ids.BODE} .js-plotly-plot", timeout=15)


def _decided(dash_duo):
    return dash_duo.find_element("#review-decided-verdict").text


def _message(dash_duo, words, timeout=15):
    dash_duo.wait_for_contains_text(f"#{ids.REVIEW_MESSAGE}", words, timeout=timeout)


def test_accept_reject_correct_change_the_verdict(dash_duo, reviewed):
    _open(dash_duo, reviewed)
    assert "fail" in _decided(dash_duo)
    _type(dash_duo, f"#{ids.REVIEW_BY}", "A. Engineer")
    dash_duo.select_dcc_dropdown(f"#{ids.REVIEW_TARGET}", value="K410-DE-Y run-up 5,000 rpm")
    _radio(dash_duo, ids.REVIEW_ACTION, "reject")
    dash_duo.select_dcc_dropdown(f"#{ids.REVIEW_REASON}", value="structural resonance")
    _click(dash_duo, f"#{ids.REVIEW_RECORD}")
    _message(dash_duo, "verdict fail → pass")
    assert "pass" in _decided(dash_duo)
    # the verdict panel at the top follows: the decided verdict first, the automatic beside
    dash_duo.wait_for_contains_text(f"#{ids.VERDICT_HEAD}", "Verdict after review", timeout=15)
    assert "pass" in dash_duo.find_element(f"#{ids.VERDICT_HEAD}").text
    auto = dash_duo.find_element(f"#{ids.VERDICT_AUTOMATIC}").text
    assert "Automatic verdict: fail" in auto and "decisions change it" in auto
    table = dash_duo.find_element("#review-decided").text
    assert "rejected: structural resonance" in table and "A. Engineer" in table

    dash_duo.select_dcc_dropdown(f"#{ids.REVIEW_TARGET}", value="K410-DE-X run-up 3,500 rpm")
    _radio(dash_duo, ids.REVIEW_ACTION, "correct")
    _type(dash_duo, f"#{ids.REVIEW_SPEED}", "4300")
    _type(dash_duo, f"#{ids.REVIEW_AF}", "5")
    _click(dash_duo, f"#{ids.REVIEW_RECORD}")
    _message(dash_duo, "verdict pass → fail")
    assert "fail" in _decided(dash_duo)
    assert "4,300 (engineer)" in dash_duo.find_element("#review-decided").text
    # the engineer's speed is drawn on the Bode plot
    dash_duo.wait_for_contains_text(f"#{ids.BODE}", "engineer: 4,300 rpm", timeout=15)

    dash_duo.select_dcc_dropdown(f"#{ids.REVIEW_TARGET}", value="K410-DE-X run-up 3,500 rpm")
    _radio(dash_duo, ids.REVIEW_ACTION, "accept")
    _click(dash_duo, f"#{ids.REVIEW_RECORD}")
    _message(dash_duo, "verdict fail → pass")
    assert "pass" in _decided(dash_duo)
    _shot(dash_duo, "review-decisions")
    r = wr.review_of(reviewed.db, reviewed.run_id)
    assert [e["action"] for e in r["entries"]] == ["reject", "correct", "accept"]
    assert {e["reviewer"] for e in r["entries"]} == {"A. Engineer"}


def test_critical_added_by_clicking_the_bode_and_an_annotation(dash_duo, reviewed, tmp_path):
    from dash.testing.wait import until
    from selenium.webdriver.common.action_chains import ActionChains

    _open(dash_duo, reviewed)
    _type(dash_duo, f"#{ids.REVIEW_BY}", "B. Engineer")
    area = dash_duo.find_element(f"#{ids.BODE} .nsewdrag")
    dash_duo.driver.execute_script("arguments[0].scrollIntoView({block: 'center'});", area)
    ActionChains(dash_duo.driver).move_to_element(area).move_by_offset(40, 10).click().perform()
    until(lambda: dash_duo.find_element(f"#{ids.REVIEW_PICK_SPEED}").get_attribute("value"),
          timeout=10)
    picked = float(dash_duo.find_element(f"#{ids.REVIEW_PICK_SPEED}").get_attribute("value"))
    assert 0 < picked <= 5460.0 * 1.2  # a speed of the run (its top: about N_mc)
    _click(dash_duo, f"#{ids.REVIEW_ADD}")
    _message(dash_duo, "Recorded (add)")
    r = wr.review_of(reviewed.db, reviewed.run_id)
    (added,) = r["added"]
    assert added["speed_rpm"] == pytest.approx(picked, abs=0.05)
    assert added["source"] == "engineer" and added["by"] == "B. Engineer"
    assert "(engineer)" in dash_duo.find_element("#review-decided").text

    _type(dash_duo, f"#{ids.REVIEW_ANNOTATE_TEXT}", "NOTE-42 oil whirl?")
    _click(dash_duo, f"#{ids.REVIEW_ANNOTATE}")
    _message(dash_duo, "Recorded (annotate)")
    dash_duo.wait_for_contains_text(f"#{ids.BODE}", "NOTE-42 oil whirl?", timeout=15)
    assert "NOTE-42 oil whirl?" in dash_duo.find_element("#review-annotations").text
    _shot(dash_duo, "review-annotated")
    page = write_report(reviewed.db, reviewed.run_id, tmp_path / "r.html", n_boot=0)
    assert "NOTE-42 oil whirl?" in page.read_text(encoding="utf-8")


def test_sign_off_shown_everywhere_and_reprocessing_keeps_it(dash_duo, reviewed, tmp_path,
                                                             capsys):
    from rundash.workflows.pipeline import process_run

    _open(dash_duo, reviewed)
    _type(dash_duo, f"#{ids.SIGN_NAME}", "R. Okafor")
    _type(dash_duo, f"#{ids.SIGN_ROLE}", "machinery engineer")
    dash_duo.select_dcc_dropdown(f"#{ids.SIGN_DECISION}", value="accepted with remarks")
    _type(dash_duo, f"#{ids.SIGN_REMARKS}", "watch DE-Y")
    _click(dash_duo, f"#{ids.SIGN_BUTTON}")
    _message(dash_duo, "Signed off (accepted with remarks)")
    dash_duo.wait_for_contains_text("#review-signed", "R. Okafor", timeout=10)
    dash_duo.driver.get(dash_duo.server_url + "/")
    dash_duo.wait_for_contains_text(f"#{ids.RUNS_TABLE} td.review-state", "signed off",
                                    timeout=10)
    capsys.readouterr()  # the server's log lines so far
    assert main(["findings", str(reviewed.run_id), "--db", str(reviewed.path), "--json"]) == 0
    so = json.loads(capsys.readouterr().out)["review"]["sign_off"]
    assert (so["name"], so["role"], so["decision"]) == (
        "R. Okafor", "machinery engineer", "accepted with remarks")
    text = write_report(reviewed.db, reviewed.run_id, tmp_path / "a.html",
                        n_boot=0).read_text(encoding="utf-8")
    assert "R. Okafor" in text[text.index('id="signoff-record"'):]

    process_run(reviewed.db, reviewed.run_id)  # re-processing the signed run
    dash_duo.driver.get(dash_duo.server_url + "/")
    dash_duo.wait_for_contains_text(f"#{ids.RUNS_TABLE} td.review-state",
                                    "signed off (earlier processing)", timeout=10)
    dash_duo.driver.get(dash_duo.server_url + f"/run/{reviewed.run_id}")
    dash_duo.wait_for_contains_text("#review-signed", "signed off on an earlier processing",
                                    timeout=15)
    _shot(dash_duo, "review-signed-earlier")
    # the report form says its fields give way to the stored sign-off
    note = dash_duo.find_element(f"#{ids.REPORT_FIELDS_NOTE}").text
    assert "stored sign-off (R. Okafor" in note and "fields below are not used" in note
    r = wr.review_of(reviewed.db, reviewed.run_id)
    assert r["sign_off"]["snapshot"]["run_verdict"] == "fail"  # as signed
    text = write_report(reviewed.db, reviewed.run_id, tmp_path / "b.html",
                        n_boot=0).read_text(encoding="utf-8")
    assert "signed off on an earlier processing" in text


def test_edit_and_delete_a_signed_run(dash_duo, reviewed):
    from sqlalchemy import func, select

    from rundash.storage import orm

    wr.sign_off(reviewed.db, reviewed.run_id, name="R. Okafor", role="", decision="accepted")
    _open(dash_duo, reviewed)
    _click(dash_duo, "#run-housekeeping summary")
    _type(dash_duo, f"#{ids.RUN_EDIT_BY}", "A. Engineer")
    _type(dash_duo, f"#{ids.RUN_EDIT_LABEL}", "First start, relabelled")
    _click(dash_duo, f"#{ids.RUN_EDIT_SAVE}")
    dash_duo.wait_for_contains_text(f"#{ids.RUN_HOUSEKEEPING_MESSAGE}", "Saved: label",
                                    timeout=10)
    log = wr.review_of(reviewed.db, reviewed.run_id)["entries"][-1]
    assert log["action"] == "edit-run" and log["reviewer"] == "A. Engineer"
    assert log["changed"]["run"]["label"] == ["First start (review test)",
                                              "First start, relabelled"]

    _click(dash_duo, f"#{ids.RUN_DELETE}")  # nothing ticked
    dash_duo.wait_for_contains_text(f"#{ids.RUN_HOUSEKEEPING_MESSAGE}", "Not deleted",
                                    timeout=10)
    _click(dash_duo, f"#{ids.RUN_DELETE_CONFIRM} input[value='confirm']")
    _click(dash_duo, f"#{ids.RUN_DELETE}")  # signed off: the second tick is missing
    dash_duo.wait_for_contains_text(f"#{ids.RUN_HOUSEKEEPING_MESSAGE}", "tick the second box",
                                    timeout=10)
    _click(dash_duo, f"#{ids.RUN_DELETE_CONFIRM} input[value='signed-off-too']")
    _click(dash_duo, f"#{ids.RUN_DELETE}")
    dash_duo.wait_for_contains_text(f"#{ids.RUN_HOUSEKEEPING_MESSAGE}",
                                    f"Run {reviewed.run_id} deleted", timeout=15)
    with reviewed.db.read() as conn:
        for table in orm.Base.metadata.sorted_tables:
            if "run_id" in table.c:
                assert conn.execute(select(func.count()).select_from(table)).scalar() == 0, \
                    table.name
        assert conn.execute(select(func.count()).select_from(
            orm.Base.metadata.tables["waveform_chunk"])).scalar() == 0
    dash_duo.driver.get(dash_duo.server_url + "/")
    dash_duo.wait_for_contains_text(f"#{ids.RUNS_TABLE}", "No runs yet", timeout=10)
