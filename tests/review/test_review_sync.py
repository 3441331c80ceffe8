"""rundash sync carries the review records (decisions, annotations, sign-offs) both ways,
SQLite laptop <-> the store (SQLite and PostgreSQL in turn); a second sync adds nothing."""

from __future__ import annotations

import pytest

from rundash.storage.engine import open_database
from rundash.storage.sync import sync
from rundash.workflows import review as wr
from tests.fleet.helpers import runs_by_content
from tests.review.helpers import make_run

pytestmark = pytest.mark.both_databases


def _uids(db, run):
    r = wr.review_of(db, run)
    return sorted(e["uid"] for e in r["entries"]), sorted(s["uid"] for s in r["sign_offs"])


def test_sync_carries_review_records_both_ways(db, tmp_path):
    laptop = open_database(str(tmp_path / "laptop.sqlite"), create=True)
    run = make_run(laptop)
    wr.record(laptop, run, "reject", reviewer="A", probe="NDE-Y", speed_rpm=5600.0,
              reason="structural")
    wr.record(laptop, run, "annotate", reviewer="A", plot="polar", probe="NDE-X",
              speed_rpm=3400.0, text="loop")
    wr.sign_off(laptop, run, name="B", role="RE", decision="accepted")
    first = sync(laptop, db)
    assert first.runs[0].action == "copied" and first.runs[0].n_review == 3
    (h, src_id), = runs_by_content(laptop).items()
    dst = runs_by_content(db)[h]
    assert _uids(db, dst) == _uids(laptop, run)
    r = wr.review_of(db, dst)
    # the processing version travels with the results: the sign-off is current there too
    assert r["state"] == "signed off" and r["run_verdict"] == "pass"
    assert r["annotations"][0]["text"] == "loop"

    # a decision made in the store reaches the laptop; nothing is duplicated
    wr.record(db, dst, "accept", reviewer="C", probe="NDE-X", speed_rpm=3500.0)
    back = sync(db, laptop)
    assert back.runs[0].action == "skipped" and back.runs[0].n_review == 1
    assert "1 review records added" in back.runs[0].reason
    assert _uids(laptop, run) == _uids(db, dst)
    again = sync(laptop, db)
    assert again.runs[0].n_review == 0 and _uids(laptop, run) == _uids(db, dst)
    laptop.dispose()
