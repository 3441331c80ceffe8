"""The review commands (``rundash review RUN ...``) and run housekeeping (``rundash edit``,
``rundash delete``): their parsers and functions."""

from __future__ import annotations

import json
import os
import sys
from datetime import datetime

from rundash import CAUTION
from rundash.cli.common import open_db, parse_time, print_table
from rundash.errors import InputError
from rundash.model import TEST_KINDS

#: what ``rundash edit --kind`` takes: a direction, or a test kind
EDIT_KINDS = ("run-up", "coast-down", "mixed", "steady") + TEST_KINDS

REVIEWER_ENV = "RUNDASH_REVIEWER"


def _num(x, fmt="{:.0f}") -> str:
    return "-" if x is None else fmt.format(x)


def _by(by: str | None) -> str:
    return by or os.environ.get(REVIEWER_ENV, "")


def add_parsers(sub, with_db) -> None:
    s = with_db(sub.add_parser("review", help="the engineer's review of a run: decide on each "
                                              "critical, annotate, sign off"))
    s.add_argument("run", type=int, help="run id (see 'rundash runs')")
    s.add_argument("--json", dest="as_json", action="store_true",
                   help="the review object as JSON (see the README)")
    s.set_defaults(func=cmd_review_show)
    acts = s.add_subparsers(dest="action", metavar="ACTION")

    def action(name, help_, func):
        a = acts.add_parser(name, help=help_)
        a.add_argument("--by", help=f"who decides (default: ${REVIEWER_ENV})")
        a.add_argument("--note", default="", help="free text kept with the entry")
        a.set_defaults(func=func)
        return a

    def target(a):
        a.add_argument("--probe", required=True, help="the probe of the critical")
        a.add_argument("--direction", choices=["run-up", "coast-down"],
                       help="run direction (needed when both have criticals of the probe)")
        a.add_argument("--speed", type=float, required=True,
                       help="speed of the automatic critical, rpm (nearest within 3 %%)")
        return a

    target(action("accept", "accept an automatic critical as a rotor critical", cmd_decide))
    a = target(action("reject", "reject an automatic critical", cmd_decide))
    a.add_argument("--reason", required=True,
                   choices=["runout", "structural", "sensor", "other"],
                   help="runout artefact, structural resonance, sensor fault, other (other "
                        "needs --note)")
    a = target(action("correct", "correct the speed (and AF) of an automatic critical",
                      cmd_decide))
    a.add_argument("--to-speed", dest="to_speed", type=float, required=True,
                   help="the critical speed read by the engineer, rpm")
    a.add_argument("--af", type=float, help="the amplification factor read by the engineer")
    a = action("add", "add a critical the automation missed", cmd_decide)
    a.add_argument("--probe", required=True)
    a.add_argument("--direction", required=True, choices=["run-up", "coast-down"])
    a.add_argument("--speed", type=float, required=True, help="rpm")
    a.add_argument("--af", type=float, help="amplification factor (default: not determined, "
                                           "the most demanding margin applies)")
    a = action("annotate", "annotate a plot at a speed", cmd_decide)
    a.add_argument("--plot", required=True,
                   choices=["bode", "polar", "cascade", "speed", "levels", "orbit"])
    a.add_argument("--probe", default="", help="the probe whose plot (default: all)")
    a.add_argument("--speed", type=float, required=True, help="rpm")
    a.add_argument("--text", required=True, help="the annotation")
    a = action("withdraw", "take back an earlier entry (it stays in the log)", cmd_decide)
    a.add_argument("uid", help="the entry's id (see 'rundash review RUN log')")
    a = acts.add_parser("sign", help="sign the run off (a record, not an electronic signature)")
    a.add_argument("--name", required=True, help="the reviewer's name")
    a.add_argument("--role", default="", help="e.g. rotating equipment engineer")
    a.add_argument("--decision", required=True,
                   choices=["accepted", "accepted-with-remarks", "not-accepted"])
    a.add_argument("--remarks", default="")
    a.add_argument("--date", dest="signed_on", help="YYYY-MM-DD (default: today)")
    a.set_defaults(func=cmd_sign)
    a = acts.add_parser("log", help="every review entry and sign-off, oldest first")
    a.set_defaults(func=cmd_review_log)

    s = with_db(sub.add_parser("edit", help="change a run's label, cycle, notes, kind or start "
                                            "time (kept in its review log)"))
    # a direction sets the run's kind; field, shop-test or trip-test its test kind (the
    # rules in scope), as --kind of the import marks them
    s.add_argument("run", type=int)
    s.add_argument("--label")
    s.add_argument("--cycle")
    s.add_argument("--notes")
    s.add_argument("--kind", choices=EDIT_KINDS,
                   help="a direction (run-up, coast-down, mixed, steady), or what the run "
                        "records: field, shop-test (mechanical running test), trip-test")
    s.add_argument("--started", type=parse_time, help="ISO 8601 with zone")
    s.add_argument("--by", default=None, help=f"who edits (default: ${REVIEWER_ENV})")
    s.set_defaults(func=cmd_edit)
    s = with_db(sub.add_parser("delete", help="delete a run and everything stored with it"))
    s.add_argument("run", type=int)
    s.add_argument("--yes", action="store_true", help="confirm the deletion")
    s.add_argument("--signed-off-too", dest="signed_off_too", action="store_true",
                   help="confirm deleting a run that was signed off")
    s.set_defaults(func=cmd_delete)


def _print_review(rv: dict, run: int) -> None:
    print(f"run {run}: review state {rv['state']}")
    print(f"verdict: {str(rv['run_verdict']).upper()} (automatic: "
          f"{str(rv['automatic_verdict']).upper()})"
          + ("; changed by the review" if rv["verdict_changed"] else ""))
    rows = [("probe", "dir", "auto rpm", "auto AF", "auto verdict", "decision", "rpm", "AF",
             "margin", "verdict", "by")]
    for c in rv["criticals"] + rv["added"]:
        a = c["automatic"] or {}
        who = c["by"] + (" (earlier processing)" if c.get("earlier_processing") else "")
        rows.append((c["probe"], c["direction"], _num(a.get("speed_rpm")),
                     _num(a.get("af"), "{:.2f}"), a.get("margin_verdict") or "-",
                     c["decision"] + (f": {c['reason']}" if c.get("reason") else ""),
                     _num(c["speed_rpm"]) + (" *" if c["source"] == "engineer" else ""),
                     _num(c["af"], "{:.2f}"), _num(c["separation_margin_pct"], "{:.1f} %"),
                     c["margin_verdict"] or "-", who or "-"))
    if len(rows) > 1:
        print_table(rows)
        if any(c["source"] == "engineer" for c in rv["criticals"] + rv["added"]):
            print("* the engineer's entry")
    for a in rv["annotations"]:
        print(f"annotation ({a['plot']}{' ' + a['probe'] if a['probe'] else ''} at "
              f"{a['speed_rpm']:.0f} rpm, {a['by']}): {a['text']}")
    s = rv["sign_off"]
    if s:
        print(f"signed off: {s['decision']} by {s['name']}"
              + (f" ({s['role']})" if s["role"] else "") + f" on {s['signed_on']}"
              + (f"; remarks: {s['remarks']}" if s["remarks"] else "") + f" — {s['note']}")
    for n in rv["notes"]:
        print(f"note: {n}")
    print(rv["record_note"])
    print(CAUTION)


def cmd_review_show(*, db: str | None, run: int, as_json: bool, action=None) -> int:
    from rundash.workflows.review import review_of

    rv = review_of(open_db(db), run)
    if as_json:
        print(json.dumps(rv, indent=2))
        return 0
    _print_review(rv, run)
    return 0


def cmd_review_log(*, db: str | None, run: int, as_json: bool, action=None) -> int:
    from rundash.workflows.review import review_of

    rv = review_of(open_db(db), run)
    if as_json:
        print(json.dumps(dict(entries=rv["entries"], sign_offs=rv["sign_offs"]), indent=2))
        return 0
    rows = [("uid", "when (UTC)", "by", "action", "about", "processing of")]
    for e in rv["entries"]:
        about = " ".join(str(x) for x in (
            e["probe_name"], e["direction"], _num(e["target_speed_rpm"]) + " rpm"
            if e["target_speed_rpm"] else "", "-> " + _num(e["speed_rpm"]) + " rpm"
            if e["speed_rpm"] else "", e["reason"], e["text"]) if x)
        rows.append((e["uid"], (e["created_at"] or "")[:19], e["reviewer"] or "-",
                     e["action"], about or "-", (e["processing_at"] or "-")[:19]))
    for s in rv["sign_offs"]:
        rows.append((s["uid"], (s["created_at"] or "")[:19], s["name"], "sign-off",
                     f"{s['decision']} {s['signed_on']}", (s["processing_at"] or "-")[:19]))
    print_table(rows)
    return 0


def cmd_decide(*, db: str | None, run: int, as_json: bool, action: str, by: str | None,
               note: str, probe: str = "", direction: str | None = None,
               speed: float | None = None, to_speed: float | None = None,
               af: float | None = None, reason: str = "", plot: str = "", text: str = "",
               uid: str | None = None) -> int:
    from rundash.workflows.review import record

    res = record(open_db(db), run, action, reviewer=_by(by), probe=probe,
                 direction=direction, speed_rpm=speed, to_speed_rpm=to_speed, af=af,
                 reason=reason, plot=plot, text=text if action == "annotate" else note,
                 target_uid=uid)
    if as_json:
        print(json.dumps(res, indent=2))
        return 0
    before, after = res["changed"]["run_verdict"]
    print(f"{res['uid']}: {action} recorded; verdict {before} -> {after}")
    return 0


def cmd_sign(*, db: str | None, run: int, as_json: bool, action: str, name: str, role: str,
             decision: str, remarks: str, signed_on: str | None) -> int:
    from rundash.workflows.review import sign_off

    res = sign_off(open_db(db), run, name=name, role=role, decision=decision,
                   remarks=remarks, signed_on=signed_on)
    if as_json:
        print(json.dumps(res, indent=2))
        return 0
    s = res["review"]["sign_off"]
    print(f"{res['uid']}: run {run} signed off, {s['decision']}, by {s['name']} on "
          f"{s['signed_on']} (verdict {res['review']['run_verdict']})")
    print(res["review"]["record_note"])
    return 0


def cmd_edit(*, db: str | None, run: int, label: str | None, cycle: str | None,
             notes: str | None, kind: str | None, started: datetime | None,
             by: str | None) -> int:
    from rundash.workflows.housekeeping import edit_run

    direction, test_kind = (None, kind) if kind in TEST_KINDS else (kind, None)
    changes = {k: v for k, v in dict(label=label, cycle=cycle, notes=notes, kind=direction,
                                     test_kind=test_kind, started_at=started).items()
               if v is not None}
    if not changes:
        raise InputError("say what to change: --label, --cycle, --notes, --kind or --started")
    diff = edit_run(open_db(db), run, by=_by(by), **changes)
    if not diff:
        print(f"run {run}: nothing changed")
    for k, pair in diff.items():
        old, new = (x.isoformat() if isinstance(x, datetime) else x for x in pair)
        print(f"run {run}: {k} {old!r} -> {new!r}")
    if "test_kind" in diff:
        from rundash.workflows.housekeeping import REPROCESS_NOTE

        print(f"run {run}: {REPROCESS_NOTE.format(old=diff['test_kind'][0])} "
              f"(rundash process {run})")
    return 0


def cmd_delete(*, db: str | None, run: int, yes: bool, signed_off_too: bool) -> int:
    from rundash.workflows.housekeeping import delete_run

    counts = delete_run(open_db(db), run, confirm=yes, signed_off_too=signed_off_too)
    shown = ", ".join(f"{n} {t}" for t, n in counts.items() if n)
    print(f"run {run} deleted ({shown})", file=sys.stderr)
    return 0
