"""``rundash review``, ``edit``, ``delete`` and the review parts of ``findings --json`` and
``runs``: scriptable, one-line errors with exit 1."""

from __future__ import annotations

import json

from rundash.cli import main
from rundash.storage.engine import open_database
from tests.review.helpers import make_run


def _run(db_path):
    db = open_database(str(db_path), create=True)
    run = make_run(db)
    db.dispose()
    return str(run)


def test_review_from_start_to_sign_off(db_path, capsys, monkeypatch):
    run, db = _run(db_path), ["--db", str(db_path)]
    monkeypatch.setenv("RUNDASH_REVIEWER", "A. Engineer")
    assert main(["review", run, *db, "reject", "--probe", "NDE-Y", "--speed", "5600",
                 "--reason", "structural"]) == 0
    assert "verdict fail -> pass" in capsys.readouterr().out
    assert main(["review", run, *db, "correct", "--probe", "NDE-X", "--speed", "3500",
                 "--to-speed", "3600", "--af", "6", "--by", "B. Other"]) == 0
    assert main(["review", run, *db, "add", "--probe", "NDE-Y", "--direction", "run-up",
                 "--speed", "2500", "--af", "3"]) == 0
    assert main(["review", run, *db, "annotate", "--plot", "bode", "--probe", "NDE-X",
                 "--speed", "3400", "--text", "rub?"]) == 0
    assert main(["review", run, *db, "sign", "--name", "C. Lead", "--role", "RE",
                 "--decision", "accepted", "--date", "2026-06-01"]) == 0
    capsys.readouterr()
    assert main(["review", run, *db]) == 0
    out = capsys.readouterr().out
    assert "signed off" in out and "rub?" in out and "rejected: structural resonance" in out
    assert "3600 *" in out and "not an electronic signature" in out
    assert main(["findings", run, *db, "--json"]) == 0
    f = json.loads(capsys.readouterr().out)
    r = f["review"]
    assert r["state"] == "signed off" and r["sign_off"]["name"] == "C. Lead"
    assert [e["action"] for e in r["entries"]] == ["reject", "correct", "add", "annotate"]
    assert r["entries"][1]["reviewer"] == "B. Other" and r["added"][0]["speed_rpm"] == 2500.0
    assert main(["runs", *db, "--json"]) == 0
    assert json.loads(capsys.readouterr().out)[0]["review"] == "signed off"
    assert main(["review", run, *db, "log"]) == 0
    assert "sign-off" in capsys.readouterr().out


def test_errors_are_one_line(db_path, capsys, monkeypatch):
    run, db = _run(db_path), ["--db", str(db_path)]
    monkeypatch.delenv("RUNDASH_REVIEWER", raising=False)
    assert main(["review", run, *db, "accept", "--probe", "NDE-X", "--speed", "3500"]) == 1
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "reviewer" in err
    assert main(["review", "99", *db]) == 1
    assert "no run with id 99" in capsys.readouterr().err


def test_edit_and_delete(db_path, capsys):
    run, db = _run(db_path), ["--db", str(db_path)]
    assert main(["edit", run, *db, "--label", "renamed", "--started",
                 "2026-05-02T07:00:00Z", "--notes", "n"]) == 0
    out = capsys.readouterr().out
    assert "'review test run' -> 'renamed'" in out and "2026-05-02T07:00:00+00:00" in out
    assert main(["review", run, *db, "sign", "--name", "C", "--decision", "accepted"]) == 0
    assert main(["delete", run, *db]) == 1
    assert main(["delete", run, *db, "--yes"]) == 1
    assert "--signed-off-too" in capsys.readouterr().err
    assert main(["delete", run, *db, "--yes", "--signed-off-too"]) == 0
    assert "deleted" in capsys.readouterr().err
    assert main(["runs", *db, "--json"]) == 0
    assert json.loads(capsys.readouterr().out) == []


def test_processing_a_signed_run_says_the_sign_off_is_of_an_earlier_processing(
        reviewed, capsys):
    run, db = str(reviewed.run_id), ["--db", str(reviewed.path)]
    assert main(["review", run, *db, "sign", "--name", "R. Okafor", "--decision",
                 "accepted"]) == 0
    capsys.readouterr()
    assert main(["process", run, *db, "--quiet"]) == 0
    err = capsys.readouterr().err
    assert "signed off on an earlier processing" in err
    assert main(["runs", *db, "--json"]) == 0
    assert json.loads(capsys.readouterr().out)[0]["review"] == "signed off (earlier processing)"
    assert main(["findings", run, *db]) == 0
    assert "signed off (earlier processing)" in capsys.readouterr().out


def test_edit_marks_a_shop_or_trip_test_and_processing_judges_it_so(reviewed, capsys):
    # run.test_kind (revision 0006) decides which rules of the profile are in scope; edit
    # sets it as the import's --kind does, and a direction still sets only the direction
    run, db = str(reviewed.run_id), ["--db", str(reviewed.path)]
    assert main(["edit", run, *db, "--kind", "shop-test", "--by", "R. Okafor"]) == 0
    out = capsys.readouterr().out
    assert "test_kind 'field' -> 'shop-test'" in out
    assert "until the run is processed again" in out and f"rundash process {run}" in out
    assert main(["runs", *db, "--json"]) == 0
    (r,) = json.loads(capsys.readouterr().out)
    assert r["test_kind"] == "shop-test" and r["kind"] == "run-up"
    assert main(["review", run, *db, "log"]) == 0
    assert "test_kind" in capsys.readouterr().out
    assert main(["process", run, *db, "--quiet"]) == 0
    capsys.readouterr()
    assert main(["findings", run, *db, "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["run"]["test_kind"] == "shop-test"
    assert main(["edit", run, *db, "--kind", "coast-down"]) == 0
    assert "kind 'run-up' -> 'coast-down'" in capsys.readouterr().out
    assert main(["edit", run, *db, "--kind", "field"]) == 0
    assert "test_kind 'shop-test' -> 'field'" in capsys.readouterr().out
    assert main(["runs", *db, "--json"]) == 0
    (r,) = json.loads(capsys.readouterr().out)
    assert (r["kind"], r["test_kind"]) == ("coast-down", "field")
