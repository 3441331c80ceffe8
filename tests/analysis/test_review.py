"""rundash.analysis.review on its own: the decided set, supersession, and the rule's scope.

Margins follow the API 617-style rule of DEVELOPERS.md, Reference values (from memory):
AF 5 needs 12.143 % below N_min; the actual margin is 100 (N_min - Nc)/N_min.
"""

from __future__ import annotations

from dataclasses import replace

import pytest

from rundash.analysis.review import apply_review, live_entries, run_verdict
from rundash.ingest.profile_file import load_profile
from tests.review.helpers import critical, findings

STAMP = "2026-06-01T00:00:00+00:00"


def _entry(uid, action, **kw):
    e = dict(uid=uid, action=action, reviewer="A", created_at=STAMP, processing_at=STAMP,
             probe_name=kw.pop("probe", ""), direction=kw.pop("direction", "run-up"),
             target_speed_rpm=kw.pop("target", None), text="", reason="")
    e.update(kw)
    return e


def test_the_last_decision_stands_and_withdraw_takes_it_back():
    f, prof = findings(1), load_profile("api617")
    e1 = _entry("a", "reject", probe="NDE-Y", target=5600.0, reason="sensor fault")
    e2 = _entry("b", "accept", probe="NDE-Y", target=5600.0)
    r = apply_review(f, [e1, e2], [], profile=prof, processing_at=STAMP)
    assert r["run_verdict"] == "fail"  # accepted: inside the range
    r = apply_review(f, [e1, e2, _entry("c", "withdraw", target_uid="b")], [], profile=prof,
                     processing_at=STAMP)
    assert r["run_verdict"] == "pass" and [e["uid"] for e in live_entries(r["entries"])] == ["a"]


def test_correct_below_the_range_against_the_rule():
    f, prof = findings(1), load_profile("api617")
    e = [_entry("r", "reject", probe="NDE-Y", target=5600.0, reason="other"),
         _entry("c", "correct", probe="NDE-X", target=3500.0, speed_rpm=4400.0, af=5.0)]
    r = apply_review(f, e, [], profile=prof, processing_at=STAMP)
    c = r["criticals"][0]
    assert c["separation_margin_pct"] == pytest.approx(12.0, abs=1e-9)  # (5000-4400)/5000
    assert c["required_margin_pct"] == pytest.approx(12.143, abs=5e-4)
    assert c["margin_verdict"] == "fail" and r["run_verdict"] == "fail"


def test_outside_the_rules_scope_a_decided_margin_is_reference_only():
    prof = load_profile("api617")
    scope = replace(prof.margin.scope, run_kinds=("run-up",))
    prof = replace(prof, margin=replace(prof.margin, scope=scope))
    f = findings(1)
    f["criticals"] = [critical("NDE-X", 3500.0, 5.0, verdict="reference only",
                               direction="coast-down")]
    f["run_verdict"] = "pass"
    e = [_entry("c", "correct", probe="NDE-X", direction="coast-down", target=3500.0,
                speed_rpm=4900.0, af=5.0)]
    r = apply_review(f, e, [], profile=prof, processing_at=STAMP)
    assert r["criticals"][0]["margin_verdict"] == "reference only"
    assert r["run_verdict"] == "pass"  # reference only is not a verdict


def test_run_verdict_rule():
    assert run_verdict([dict(counts_for_run_verdict=True, margin_verdict="pass")], [],
                       short=True, structural=False) == "not judged"
    assert run_verdict([dict(counts_for_run_verdict=False, margin_verdict="fail")], [],
                       short=False, structural=False) == "pass"
    assert run_verdict([], [{"verdict": "exceeds"}], short=False, structural=False) == "fail"
