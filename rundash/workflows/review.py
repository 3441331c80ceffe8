"""The engineer's review of a run: record decisions, annotations and sign-offs, and the
``review`` object of the findings (the decided set, the recomputed verdict, the record).

Every entry is appended with who made it, when, what it changed (the run verdict before
and after, the automatic reading it was about) and the processing it refers to (the time
of the run's processing, :func:`rundash.storage.review_queries.processing_time`). Nothing
is edited in place: a later decision on a critical supersedes an earlier one, and
``withdraw`` takes back an entry. The application itself is pure
(:mod:`rundash.analysis.review`).
"""

from __future__ import annotations

from datetime import date, datetime
from typing import Any

from rundash.analysis import review as rv
from rundash.errors import InputError, NotFoundError, invalid_value
from rundash.ingest.machine_file import parse_machine_description
from rundash.ingest.profile_file import load_profile
from rundash.storage import queries as q
from rundash.storage import review_queries as rq
from rundash.storage.engine import Database

# for the faces
RECORD_NOTE, REJECT_REASONS, SIGN_OFF_DECISIONS = (rv.RECORD_NOTE, rv.REJECT_REASONS,
                                                   rv.SIGN_OFF_DECISIONS)
#: a sign-off decision as typed (spaces or hyphens) -> the decision
SIGN_OFF_WORDS = {w: d for d in SIGN_OFF_DECISIONS for w in (d, d.replace(" ", "-"))}
REASON_WORDS = {"runout": "runout artefact", "runout artefact": "runout artefact",
                "structural": "structural resonance",
                "structural resonance": "structural resonance", "sensor": "sensor fault",
                "sensor fault": "sensor fault", "other": "other"}


def _iso(t) -> str | None:
    return t.isoformat() if isinstance(t, (datetime, date)) else t


def _jsonable(rows: list[dict[str, Any]]) -> list[dict[str, Any]]:
    return [{k: _iso(v) for k, v in r.items()} for r in rows]


def _profile(conn, run_id: int):
    text = q.run_description_toml(conn, run_id)
    if text:
        name = parse_machine_description(text, f"run {run_id} machine description").machine.profile
    else:
        name = q.get_machine(conn, q.run_machine_id(conn, run_id)).spec.profile
    return load_profile(name)


def review_in(conn, run_id: int, *, extra: dict[str, Any] | None = None) -> dict[str, Any]:
    """The ``review`` object of a run, read inside the caller's transaction (with
    ``extra``, an entry not stored yet, as if it were the newest)."""
    q.get_run(conn, run_id)  # NotFoundError naming the run
    proc = q.load_processing(conn, run_id)
    findings = proc.findings if proc is not None else None
    profile = _profile(conn, run_id) if findings is not None else None
    entries = _jsonable(rq.load_decisions(conn, run_id)) + ([extra] if extra else [])
    return rv.apply_review(findings, entries,
                           _jsonable(rq.load_sign_offs(conn, run_id)), profile=profile,
                           processing_at=_iso(rq.processing_time(conn, run_id)))


def review_of(db: Database, run_id: int) -> dict[str, Any]:
    """The ``review`` object of a run (see :func:`rundash.analysis.review.apply_review`)."""
    with db.read() as conn:
        return review_in(conn, run_id)


def findings_with_review(db: Database, run_id: int) -> dict[str, Any] | None:
    """The run's findings JSON with its ``review`` object, or None when not processed."""
    with db.read() as conn:
        proc = q.load_processing(conn, run_id)
        if proc is None or proc.findings is None:
            q.get_run(conn, run_id)
            return None
        return dict(proc.findings, review=review_in(conn, run_id))


def review_states(db: Database, runs) -> dict[int, str]:
    """Review state per run (``not processed``, ``processed``, ``reviewed``, ``signed
    off``, ``signed off (earlier processing)``) without recomputing verdicts."""
    with db.read() as conn:
        counts = rq.review_counts(conn, [r.id for r in runs])
        stamps = {r.id: rq.processing_time(conn, r.id) for r in runs}
    out = {}
    for r in runs:
        c = counts.get(r.id, {})
        if "signed_processing_at" in c:
            same = c["signed_processing_at"] is not None and c["signed_processing_at"] == stamps[r.id]
            out[r.id] = "signed off" if same else "signed off (earlier processing)"
        elif not r.processed:
            out[r.id] = "not processed"
        else:
            out[r.id] = "reviewed" if c.get("n_entries") else "processed"
    return out


def _reviewer(name: str) -> str:
    name = (name or "").strip()
    if not name:
        raise InputError(invalid_value("reviewer", name, "the reviewer's name (who decides)"))
    return name


def _positive(name: str, v: float | None, *, required: bool) -> float | None:
    if v is None:
        if required:
            raise InputError(invalid_value(name, v, "a positive number"))
        return None
    v = float(v)
    if not v > 0 or v != v or v == float("inf"):
        raise InputError(invalid_value(name, v, "a positive number"))
    return v


def _target(review: dict[str, Any], run_id: int, probe: str, direction: str | None,
            speed_rpm: float) -> dict[str, Any]:
    """The current automatic critical a decision is about (probe, direction, nearest
    speed within MATCH_PCT)."""
    crits = [c for c in review["criticals"] if c["probe"] == probe
             and (direction is None or c["direction"] == direction)]
    if not crits:
        names = sorted({f"{c['probe']} {c['direction']}" for c in review["criticals"]})
        raise NotFoundError(f"run {run_id} has no automatic critical of probe {probe!r}"
                            + (f" {direction}" if direction else "")
                            + f" (criticals: {', '.join(names) or 'none'})")
    autos = [dict(probe=c["probe"], direction=c["direction"],
                  speed_rpm=c["automatic"]["speed_rpm"]) for c in crits]
    k = rv.match_critical(autos, probe, autos[0]["direction"] if direction is None
                          and len({a["direction"] for a in autos}) == 1 else (direction or ""),
                          speed_rpm)
    if k is None:
        have = ", ".join(f"{a['direction']} {a['speed_rpm']:.0f} rpm" for a in autos)
        raise NotFoundError(f"run {run_id}: no automatic critical of {probe} within "
                            f"{rv.MATCH_PCT:g} % of {speed_rpm:.0f} rpm"
                            + ("" if direction else " (give --direction when both run "
                               "directions have criticals)") + f"; there are: {have}")
    return crits[k]


def record(db: Database, run_id: int, action: str, *, reviewer: str, probe: str = "",
           direction: str | None = None, speed_rpm: float | None = None,
           to_speed_rpm: float | None = None, af: float | None = None, reason: str = "",
           plot: str = "", text: str = "", target_uid: str | None = None) -> dict[str, Any]:
    """Append one review entry and return it with the review after it.

    ``accept``/``reject``/``correct``: the automatic critical of ``probe`` (and
    ``direction``) nearest ``speed_rpm``; ``correct`` takes the engineer's
    ``to_speed_rpm`` and ``af``. ``add``: a critical at ``speed_rpm`` (``af`` optional).
    ``annotate``: ``text`` on ``plot`` at ``speed_rpm``. ``withdraw``: ``target_uid``.
    """
    reviewer = _reviewer(reviewer)
    if action not in rv.ACTIONS or action == "edit-run":
        raise InputError(invalid_value("action", action, ", ".join(rv.ACTIONS[:-1])))
    if direction is not None and direction not in rv.DIRECTIONS:
        raise InputError(invalid_value("direction", direction, "run-up or coast-down"))
    with db.write() as conn:
        before = review_in(conn, run_id)
        stamp = rq.processing_time(conn, run_id)
        values: dict[str, Any] = dict(text=text.strip())
        changed: dict[str, Any] = {}
        if action in rv.DECISIONS + ("add",) and stamp is None:
            raise NotFoundError(f"run {run_id} has no findings yet: run 'rundash process "
                                f"{run_id}' first")
        if action in rv.DECISIONS:
            c = _target(before, run_id, probe, direction,
                        _positive("speed_rpm", speed_rpm, required=True))
            values.update(probe_name=c["probe"], direction=c["direction"],
                          target_speed_rpm=c["automatic"]["speed_rpm"])
            changed["critical"] = dict(probe=c["probe"], direction=c["direction"],
                                       automatic=c["automatic"], decision_before=c["decision"])
            if action == "reject":
                word = REASON_WORDS.get(reason.strip().lower())
                if word is None:
                    raise InputError(invalid_value("reason", reason, ", ".join(
                        rv.REJECT_REASONS)))
                if word == "other" and not values["text"]:
                    raise InputError("a rejection for reason 'other' needs a note saying why")
                values["reason"] = word
            if action == "correct":
                values.update(speed_rpm=_positive("to_speed_rpm", to_speed_rpm, required=True),
                              af=_positive("af", af, required=False))
        elif action == "add":
            if direction is None:
                raise InputError(invalid_value("direction", direction, "run-up or coast-down"))
            names = {p["name"] for p in q.load_processing(conn, run_id).findings.get("probes", [])}
            if probe not in names:
                raise NotFoundError(f"run {run_id} has no probe {probe!r} (probes: "
                                    f"{', '.join(sorted(names))})")
            values.update(probe_name=probe, direction=direction,
                          speed_rpm=_positive("speed_rpm", speed_rpm, required=True),
                          af=_positive("af", af, required=False))
        elif action == "annotate":
            if plot not in rv.PLOTS:
                raise InputError(invalid_value("plot", plot, ", ".join(rv.PLOTS)))
            if not values["text"]:
                raise InputError(invalid_value("text", text, "the annotation's text"))
            values.update(plot=plot, probe_name=probe or "",
                          speed_rpm=_positive("speed_rpm", speed_rpm, required=True))
        elif action == "withdraw":
            mine = {e["uid"]: e for e in before["entries"]}
            if target_uid not in mine or mine[target_uid]["action"] in ("withdraw", "edit-run"):
                raise NotFoundError(f"run {run_id} has no review entry {target_uid!r} to "
                                    "withdraw (see 'rundash review RUN log')")
            values["target_uid"] = target_uid
            changed["withdrawn"] = {k: mine[target_uid].get(k) for k in (
                "action", "probe_name", "direction", "target_speed_rpm", "speed_rpm", "af",
                "reason", "text", "reviewer", "created_at")}
        pending = dict(values, uid="pending", reviewer=reviewer, action=action,
                       processing_at=_iso(stamp), created_at=None)
        verdict_after = review_in(conn, run_id, extra=pending)["run_verdict"]
        changed["run_verdict"] = [before["run_verdict"], verdict_after]
        uid = rq.add_decision(conn, run_id, reviewer=reviewer, action=action,
                              processing_at=stamp, changed=changed, **values)
        after = review_in(conn, run_id)
    return dict(uid=uid, action=action, changed=changed, review=after)


def sign_off(db: Database, run_id: int, *, name: str, role: str, decision: str,
             remarks: str = "", signed_on: str | None = None) -> dict[str, Any]:
    """Append a sign-off of the run's current review (name, role, decision, remarks,
    date), keeping a snapshot of what is signed and the processing it refers to."""
    name = _reviewer(name)
    word = SIGN_OFF_WORDS.get((decision or "").strip().lower())
    if word is None:
        raise InputError(invalid_value("decision", decision, "accepted, accepted-with-remarks "
                                       "or not-accepted"))
    if word == "accepted with remarks" and not remarks.strip():
        raise InputError("a sign-off 'accepted with remarks' needs the remarks")
    day = signed_on or date.today().isoformat()
    try:
        day = date.fromisoformat(day).isoformat()
    except ValueError:
        raise InputError(invalid_value("date", signed_on, "a date YYYY-MM-DD")) from None
    with db.write() as conn:
        review = review_in(conn, run_id)
        stamp = rq.processing_time(conn, run_id)
        if stamp is None:
            raise NotFoundError(f"run {run_id} has no findings to sign off: run 'rundash "
                                f"process {run_id}' first")
        uid = rq.add_sign_off(conn, run_id, name=name, role=role.strip(), decision=word,
                              remarks=remarks.strip(), signed_on=day, processing_at=stamp,
                              snapshot=rv.snapshot(review))
        after = review_in(conn, run_id)
    return dict(uid=uid, review=after)
