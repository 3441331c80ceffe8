"""Run housekeeping: edit a run's label, cycle, notes, kind, test kind and start time;
delete a run.

An edit is kept in the run's review log (an ``edit-run`` entry saying what changed from
what), so a signed run is never changed silently. Deleting takes every row of the run
with it (channels, waveform chunks, results, live rows, review records); a signed-off
run needs an explicit extra confirmation.
"""

from __future__ import annotations

from datetime import datetime, timezone
from typing import Any

from rundash.errors import InputError, invalid_value
from rundash.model import TEST_KINDS
from rundash.storage import queries as q
from rundash.storage import review_queries as rq
from rundash.storage.engine import Database

KINDS = ("run-up", "coast-down", "mixed", "steady")
EDITABLE = ("label", "cycle", "notes", "kind", "test_kind", "started_at")
#: what a changed test kind leaves stale: the verdicts were judged with the old one
REPROCESS_NOTE = ("the verdicts stay those of the last processing, judged as {old}, until "
                  "the run is processed again")


def edit_run(db: Database, run_id: int, *, by: str = "", **changes: Any) -> dict[str, list]:
    """Change the given fields (``label``, ``cycle``, ``notes``, ``kind`` the run's
    direction, ``test_kind`` — ``field``, ``shop-test`` (mechanical running test) or
    ``trip-test``, which decides the rules in scope — ``started_at`` as a UTC-aware
    datetime or None); returns ``{field: [before, after]}`` of the fields that changed
    (nothing stored when none did). A changed test kind takes effect on the verdicts when
    the run is processed again (:data:`REPROCESS_NOTE`)."""
    unknown = set(changes) - set(EDITABLE)
    if unknown:
        raise InputError(invalid_value("field", sorted(unknown)[0], ", ".join(EDITABLE)))
    if "kind" in changes and changes["kind"] not in KINDS:
        raise InputError(invalid_value("kind", changes["kind"], ", ".join(KINDS)))
    if "test_kind" in changes and changes["test_kind"] not in TEST_KINDS:
        raise InputError(invalid_value("test_kind", changes["test_kind"], ", ".join(TEST_KINDS)))
    t = changes.get("started_at")
    if t is not None:
        if not isinstance(t, datetime) or t.tzinfo is None:
            raise InputError(invalid_value("started_at", t, "a time with its zone"))
        changes["started_at"] = t.astimezone(timezone.utc)
    with db.write() as conn:
        run = q.get_run(conn, run_id)
        diff: dict[str, list] = {}
        for k, v in changes.items():
            old = getattr(run, k)
            if v != old:
                diff[k] = [old, v]
        if not diff:
            return {}
        q.update_run(conn, run_id, **{k: v[1] for k, v in diff.items()})
        shown = {k: [x.isoformat() if isinstance(x, datetime) else x for x in v]
                 for k, v in diff.items()}
        rq.add_decision(conn, run_id, reviewer=by.strip(), action="edit-run",
                        changed={"run": shown}, text=", ".join(sorted(shown)),
                        processing_at=rq.processing_time(conn, run_id))
    return diff


def delete_run(db: Database, run_id: int, *, confirm: bool = False,
               signed_off_too: bool = False) -> dict[str, int]:
    """Delete a run and all its rows; ``confirm`` must be given, and ``signed_off_too``
    as well for a run with a sign-off. Returns the rows deleted by table."""
    if not confirm:
        raise InputError(f"deleting run {run_id} needs confirmation (--yes on the command line)")
    with db.write() as conn:
        q.get_run(conn, run_id)
        signed = rq.load_sign_offs(conn, run_id)
        if signed and not signed_off_too:
            s = signed[-1]
            raise InputError(f"run {run_id} was signed off ({s['decision']}, by {s['name']} on "
                             f"{s['signed_on']}): deleting it needs the extra confirmation "
                             "(--signed-off-too on the command line)")
        return rq.delete_run(conn, run_id)
