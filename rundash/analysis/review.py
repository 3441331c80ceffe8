"""The engineer's review applied to the automatic findings (pure: no I/O).

The automatic critical speeds are proposals; the engineer's entries decide. Entries are
plain dicts in the order they were made (oldest first), as ``storage`` returns them:

``action``
    ``accept``, ``reject`` (``reason`` one of :data:`REJECT_REASONS`), ``correct``
    (``speed_rpm`` and optionally ``af`` read by the engineer), ``add`` (a critical the
    automation missed: ``probe_name``, ``direction``, ``speed_rpm``, optional ``af``),
    ``annotate`` (``text`` on ``plot`` at ``speed_rpm``), ``withdraw`` (takes back the
    entry ``target_uid``), ``edit-run`` (run housekeeping; shown in the log only).
``probe_name``, ``direction``, ``target_speed_rpm``
    The automatic critical an accept, reject or correct is about.

A later decision on the same critical supersedes an earlier one; nothing is edited.
Decisions made on an earlier processing of the run are matched to the current critical
of the same probe and direction nearest in speed, within :data:`MATCH_PCT` % (our own
tolerance: a re-processing moves a critical by a fraction of its half-power band), and
marked as made on the earlier processing.

The verdict is recomputed from the decided set with the profile's margin rule
(:func:`rundash.analysis.verdicts.judge_speed`): rejected criticals drop out, accepted
ones count as rotor criticals (an amplitude-only candidate the engineer accepts is judged
like a confirmed one), corrected and added ones are judged at the engineer's speed and AF.
The level checks stay the automatic ones.
"""

from __future__ import annotations

from typing import Any, Iterable, Sequence

from rundash import CAUTION
from rundash.analysis.verdicts import judge_speed

ACTIONS = ("accept", "reject", "correct", "add", "annotate", "withdraw", "edit-run")
DECISIONS = ("accept", "reject", "correct")
REJECT_REASONS = ("runout artefact", "structural resonance", "sensor fault", "other")
SIGN_OFF_DECISIONS = ("accepted", "accepted with remarks", "not accepted")
PLOTS = ("bode", "polar", "cascade", "speed", "levels", "orbit")
DIRECTIONS = ("run-up", "coast-down")
#: how far (percent of speed) a decision's critical may lie from the current one it is
#: matched to after a re-processing (our own tolerance)
MATCH_PCT = 3.0
RECORD_NOTE = ("This review is a record of who decided what and when, kept in the "
               "database; it is not an electronic signature in any legal sense.")

_DECIDED = {"accept": "accepted", "reject": "rejected", "correct": "corrected"}


def match_critical(criticals: Sequence[dict[str, Any]], probe: str, direction: str,
                   speed_rpm: float, *, within_pct: float = MATCH_PCT) -> int | None:
    """Index of the critical of ``probe`` and ``direction`` nearest ``speed_rpm`` within
    ``within_pct`` percent, or None.

    >>> crits = [{"probe": "A", "direction": "run-up", "speed_rpm": 3500.0},
    ...          {"probe": "A", "direction": "run-up", "speed_rpm": 7000.0}]
    >>> match_critical(crits, "A", "run-up", 3560.0), match_critical(crits, "A", "run-up", 5000.0)
    (0, None)
    """
    best, best_d = None, None
    for k, c in enumerate(criticals):
        s = c.get("speed_rpm")
        if c.get("probe") != probe or c.get("direction") != direction or s is None:
            continue
        d = abs(float(s) - float(speed_rpm))
        if d <= within_pct / 100.0 * float(s) and (best_d is None or d < best_d):
            best, best_d = k, d
    return best


def _same_time(a, b) -> bool:
    return a is not None and b is not None and a == b


def _margin(speed, af, machine, profile, *, confirmed=True, damping=None, basis=None,
            run_kind=None):
    m = judge_speed(speed, af, profile=profile,
                    min_operating_speed_rpm=machine["min_operating_speed_rpm"],
                    max_continuous_speed_rpm=machine["max_continuous_speed_rpm"],
                    rated_speed_rpm=machine.get("rated_speed_rpm"), damping_ratio=damping,
                    confirmed=confirmed, af_basis=basis)
    verdict, reason = m.verdict, m.reason
    scope = getattr(profile.margin, "scope", None)
    if run_kind and scope is not None and not scope.covers(run_kind):
        # outside the rule's scope the margin is shown, never judged (as judge() does)
        verdict = "reference only"
        reason = (f"the margin rule applies to: {scope.describe()}; this run is a {run_kind}, "
                  f"so the margin is shown for reference only. {reason}")
    return dict(side=m.side, separation_margin_pct=m.separation_margin_pct,
                required_margin_pct=m.required_margin_pct, margin_verdict=verdict,
                margin_reason=reason)


def _who(e: dict[str, Any], processing_at) -> dict[str, Any]:
    return dict(uid=e.get("uid"), by=e.get("reviewer", ""), at=e.get("created_at"),
                note=e.get("text", ""),
                earlier_processing=not _same_time(e.get("processing_at"), processing_at))


def live_entries(entries: Iterable[dict[str, Any]]) -> list[dict[str, Any]]:
    """The entries not withdrawn (a withdraw entry itself is never live)."""
    entries = list(entries)
    gone = {e.get("target_uid") for e in entries if e.get("action") == "withdraw"}
    return [e for e in entries if e.get("action") != "withdraw" and e.get("uid") not in gone]


def run_verdict(decided: Sequence[dict[str, Any]], limits: Sequence[dict[str, Any]], *,
                short: bool, structural: bool) -> str:
    """``fail`` if a counted critical fails or a limit is exceeded; else ``not judged`` if
    one is not judged, the run was short of the range or had nothing to judge; else
    ``pass`` (the rule of :func:`rundash.analysis.verdicts.summarize`)."""
    counted = [c["margin_verdict"] for c in decided
               if c.get("counts_for_run_verdict") and c.get("decision") != "rejected"]
    if "fail" in counted or any(x.get("verdict") == "exceeds" for x in limits):
        return "fail"
    if "borderline" in counted:
        return "borderline"
    if "not judged" in counted or short or structural:
        return "not judged"
    return "pass"


def apply_review(findings: dict[str, Any] | None, entries: Sequence[dict[str, Any]],
                 sign_offs: Sequence[dict[str, Any]], *, profile, processing_at=None
                 ) -> dict[str, Any]:
    """The ``review`` object of a run (documented in the README, "Findings and their
    JSON"): the decided criticals beside the automatic readings, the engineer's added
    criticals, the annotations, the recomputed verdict, the sign-off and the full log.

    ``findings`` is the run's findings JSON (None: not processed); ``processing_at`` the
    time of the processing it came from (the processing version entries refer to).
    """
    entries = list(entries)
    live = live_entries(entries)
    notes: list[str] = []
    out: dict[str, Any] = dict(
        processing_at=processing_at, automatic_verdict=None, run_verdict=None,
        verdict_changed=False, criticals=[], added=[], annotations=[], unmatched=[],
        entries=entries, sign_off=None, sign_offs=list(sign_offs), notes=notes,
        record_note=RECORD_NOTE, caution=CAUTION)
    for e in live:
        if e.get("action") == "annotate":
            out["annotations"].append(dict(
                plot=e.get("plot", ""), probe=e.get("probe_name", ""),
                speed_rpm=e.get("speed_rpm"), text=e.get("text", ""),
                **{k: v for k, v in _who(e, processing_at).items() if k != "note"}))
    if findings is None:
        out["state"] = "not processed"
        _sign_off_state(out, processing_at)
        return out
    machine = findings.get("machine", {})
    auto = findings.get("criticals", [])
    test_kind = (findings.get("run") or {}).get("test_kind") or "field"

    def kind_of(direction):  # the run kind a margin rule's scope is checked against
        return direction if test_kind == "field" else test_kind
    decision_of: dict[int, dict[str, Any]] = {}
    for e in live:
        if e.get("action") not in DECISIONS:
            continue
        k = match_critical(auto, e.get("probe_name", ""), e.get("direction", ""),
                           e.get("target_speed_rpm") or 0.0)
        if k is None:
            out["unmatched"].append(dict(action=e["action"], probe=e.get("probe_name"),
                                         direction=e.get("direction"),
                                         speed_rpm=e.get("target_speed_rpm"),
                                         **_who(e, processing_at)))
        else:
            decision_of[k] = e  # entries are oldest first: the last one stands
    decided = []
    for k, c in enumerate(auto):
        a = dict(speed_rpm=c.get("speed_rpm"), af=c.get("af_governing"),
                 af_method=c.get("af_method"), classification=c.get("classification"),
                 margin_verdict=c.get("margin_verdict"),
                 separation_margin_pct=c.get("separation_margin_pct"),
                 required_margin_pct=c.get("required_margin_pct"))
        row = dict(probe=c.get("probe"), direction=c.get("direction"), automatic=a,
                   decision="undecided", reason="", source="automatic",
                   counts_for_run_verdict=bool(c.get("counts_for_run_verdict", True)),
                   speed_rpm=a["speed_rpm"], af=a["af"], side=c.get("side"),
                   separation_margin_pct=a["separation_margin_pct"],
                   required_margin_pct=a["required_margin_pct"],
                   margin_verdict=a["margin_verdict"], margin_reason=c.get("margin_reason"),
                   uid=None, by="", at=None, note="", earlier_processing=False)
        e = decision_of.get(k)
        if e is not None:
            row.update(decision=_DECIDED[e["action"]], reason=e.get("reason", ""),
                       **_who(e, processing_at))
            if e["action"] == "reject":
                row.update(margin_verdict=None, margin_reason=(
                    f"rejected by {e.get('reviewer', '')}: {e.get('reason', '')}"),
                    separation_margin_pct=None, required_margin_pct=None)
            elif e["action"] == "accept" and c.get("speed_rpm") is not None:
                af = c.get("af_governing")
                row.update(_margin(c["speed_rpm"], af, machine, profile,
                                   damping=c.get("damping_ratio_fit"),
                                   run_kind=kind_of(c.get("direction")),
                                   basis=(f"AF {af:.2f} by {c.get('af_method')}; accepted by "
                                          f"{e.get('reviewer', '')}") if af is not None
                                   else None))
            elif e["action"] == "correct":
                speed = e.get("speed_rpm") or c.get("speed_rpm")
                af = e.get("af") if e.get("af") is not None else c.get("af_governing")
                basis = None if af is None else (
                    f"AF {af:.2f} read by {e.get('reviewer', '')}" if e.get("af") is not None
                    else f"AF {af:.2f} by {c.get('af_method')}, speed read by "
                         f"{e.get('reviewer', '')}")
                row.update(speed_rpm=speed, af=af, source="engineer",
                           **_margin(speed, af, machine, profile, basis=basis,
                                     run_kind=kind_of(c.get("direction"))))
        decided.append(row)
    for e in live:
        if e.get("action") != "add" or e.get("speed_rpm") is None:
            continue
        af = e.get("af")
        basis = None if af is None else f"AF {af:.2f} read by {e.get('reviewer', '')}"
        out["added"].append(dict(
            probe=e.get("probe_name", ""), direction=e.get("direction", ""), automatic=None,
            decision="added", reason="", source="engineer", counts_for_run_verdict=True,
            speed_rpm=e["speed_rpm"], af=af,
            **_margin(e["speed_rpm"], af, machine, profile, basis=basis,
                      run_kind=kind_of(e.get("direction"))),
            **_who(e, processing_at)))
    limits = findings.get("limits", [])
    top = (findings.get("processing", {}).get("speed_range_rpm") or [None, None])[1]
    short = top is not None and top < machine.get("min_operating_speed_rpm", 0.0)
    automatic = findings.get("run_verdict")
    as_found = [dict(counts_for_run_verdict=r["counts_for_run_verdict"],
                     margin_verdict=r["automatic"]["margin_verdict"]) for r in decided]
    structural = automatic == "not judged" and run_verdict(
        as_found, limits, short=short, structural=False) != "not judged"
    verdict = run_verdict(decided + out["added"], limits, short=short, structural=structural)
    out.update(criticals=decided, automatic_verdict=automatic, run_verdict=verdict,
               verdict_changed=verdict != automatic)
    if any(r["decision"] != "undecided" for r in decided) or out["added"]:
        notes.append("the level checks are the automatic ones: a rejected or corrected "
                     "critical does not change them")
    if any(r.get("earlier_processing") for r in decided + out["added"]):
        notes.append("some decisions were made on an earlier processing of the run and are "
                     f"matched to the current criticals by probe, direction and speed (within "
                     f"{MATCH_PCT:g} %)")
    if out["unmatched"]:
        notes.append(f"{len(out['unmatched'])} decision(s) match no current critical (the run "
                     "was processed again): they do not count; decide again")
    decided_any = any(e.get("action") in DECISIONS + ("add", "annotate") for e in live)
    out["state"] = "reviewed" if decided_any else "processed"
    _sign_off_state(out, processing_at)
    return out


def _sign_off_state(out: dict[str, Any], processing_at) -> None:
    if not out["sign_offs"]:
        return
    last = dict(out["sign_offs"][-1])
    current = _same_time(last.get("processing_at"), processing_at)
    last["current"] = current
    if current:
        last["note"] = "signed off on the current processing"
        out["state"] = "signed off"
    else:
        last["note"] = (f"signed off on an earlier processing ({_iso(last.get('processing_at'))}"
                        f"); the run was processed again ({_iso(processing_at)}): the signed "
                        "record keeps what was signed, the current results are not signed")
        out["state"] = "signed off (earlier processing)"
        out["notes"].append(last["note"])
    out["sign_off"] = last


def _iso(t) -> str:
    if t is None:
        return "not processed"
    return t.isoformat() if hasattr(t, "isoformat") else str(t)


def snapshot(review: dict[str, Any]) -> dict[str, Any]:
    """What a sign-off keeps of the review it signs: the verdicts and the decided
    criticals (speed, AF, margin verdict, decision, whose)."""
    keep = ("probe", "direction", "decision", "reason", "source", "speed_rpm", "af",
            "margin_verdict", "separation_margin_pct", "required_margin_pct")
    return dict(automatic_verdict=review.get("automatic_verdict"),
                run_verdict=review.get("run_verdict"),
                criticals=[{k: r.get(k) for k in keep} | {"automatic_speed_rpm": (
                    r.get("automatic") or {}).get("speed_rpm")}
                           for r in review.get("criticals", []) + review.get("added", [])],
                n_annotations=len(review.get("annotations", [])))
