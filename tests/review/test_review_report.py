"""The report's review parts: the sign-off block filled from the stored sign-off, the
decisions beside the automatic readings, the annotations, and the note when the run was
processed again after its sign-off."""

from __future__ import annotations

import html
import re

from rundash.report import write_report
from rundash.workflows import review as wr
from tests.review.conftest import review_findings


def _text(path) -> str:
    """The page's text with its tags, except bold and italics (kept for the class marks)."""
    return html.unescape(re.sub(r"</?(b|i)>", "", path.read_text(encoding="utf-8")))


def test_report_carries_the_review_and_the_signed_block(reviewed, tmp_path):
    db, run = reviewed.db, reviewed.run_id
    wr.record(db, run, "reject", reviewer="A. Engineer", probe="K410-DE-Y", speed_rpm=5000.0,
              reason="structural", text="pedestal mode, see the impact test")
    wr.record(db, run, "correct", reviewer="A. Engineer", probe="K410-DE-X", speed_rpm=3500.0,
              to_speed_rpm=3560.0, af=5.5)
    wr.record(db, run, "annotate", reviewer="A. Engineer", plot="bode", probe="K410-DE-X",
              speed_rpm=3300.0, text="ANNOTATION-7 rub at the seal?")
    wr.sign_off(db, run, name="R. Okafor", role="machinery engineer",
                decision="accepted-with-remarks", remarks="watch DE-Y", signed_on="2026-06-02")
    t = _text(write_report(db, run, tmp_path / "r.html", n_boot=0))
    assert "The engineer's review" in t
    assert "Run verdict after the engineer's review: pass" in t
    assert "rejected: structural resonance — pedestal mode, see the impact test" in t
    assert "3,560 *" in t and "3,500" in t  # the engineer's speed beside the automatic one
    assert "ANNOTATION-7 rub at the seal?" in t
    block = t[t.index('id="signoff-record"'):]
    assert "R. Okafor" in block and "machinery engineer" in block and "2026-06-02" in block
    assert '<span class="box x"></span>accepted with remarks' in block
    assert "watch DE-Y" in block and "not an electronic signature" in block
    assert "earlier processing" not in block
    typed = _text(write_report(db, run, tmp_path / "t.html", n_boot=0, reviewer="Someone Else"))
    block = typed[typed.index('id="signoff-record"'):]
    assert "R. Okafor" in block and "Someone Else" not in block
    assert "the reviewer fields given for this report are not used" in block


def test_report_says_the_sign_off_is_of_an_earlier_processing(reviewed, tmp_path):
    from rundash.storage import queries as q

    db, run = reviewed.db, reviewed.run_id
    wr.sign_off(db, run, name="R. Okafor", role="", decision="accepted")
    with db.write() as conn:  # processed again after the sign-off: a new processing row
        proc = q.load_processing(conn, run)
        q.clear_results(conn, run)
        q.save_processing(conn, run, version="again", params=proc.params,
                          slow_roll_rpm=proc.slow_roll_rpm, tach_report=proc.tach_report,
                          segments=proc.segments, warnings=proc.warnings)
        q.save_findings_json(conn, run, review_findings(run, reviewed.machine))
    t = _text(write_report(db, run, tmp_path / "r.html", n_boot=0))
    block = t[t.index('id="signoff-record"'):]
    assert "signed off on an earlier processing" in block and "R. Okafor" in block
    assert "review state: signed off (earlier processing)" in t
