"""Every case of the bad-input corpus (``make_corpus.py``) through ``rundash import``.

Refused input: exit 1, one line naming the file, channel, row or key and what was
expected, and the database byte-identical (``db_fingerprint``). Doubtful but usable input
(a clipped or dead probe): imported, the warning recorded with the run. Processing
failures (no tach pulses, a stuck tach, too short): the import stands whole, the run is
left imported and unprocessed, the one-line error names the run, and a retry changes
nothing. What "expected" means per case is written beside the case in make_corpus.py.
"""

from __future__ import annotations

import re
import shutil
from collections import Counter

import pytest

from rundash.cli import main
from rundash.storage import queries as q
from rundash.storage.engine import open_database
from tests.badinput.make_corpus import build
from tests.conftest import db_fingerprint, run_warnings

ERROR = re.compile(r"^rundash (import|process): error: ")


@pytest.fixture(scope="module")
def corpus(tmp_path_factory):
    root = tmp_path_factory.mktemp("corpus")
    return root, build(root)


@pytest.fixture(scope="module")
def template(corpus, tmp_path_factory):
    """A database holding one good run, so byte-identity is checked on a non-empty file."""
    root, _ = corpus
    path = tmp_path_factory.mktemp("template") / "template.sqlite"
    assert main(["import", "--machine", str(root / "machine.toml"), "--db", str(path),
                 "--quiet", "--label", "good", "--", str(root / "good.csv")]) == 0
    db = open_database(str(path), create=True)
    db_fingerprint(db)  # checkpoint: the file alone holds everything
    db.dispose()
    return path


def _fresh_db(template, tmp_path, name):
    path = tmp_path / f"{name}.sqlite"
    shutil.copyfile(template, path)
    db = open_database(str(path), create=True)
    return path, db


def _import(root, case, db_path, capsys):
    args = ["import", "--machine", str(root / case.machine), "--db", str(db_path), "--quiet"]
    if case.process:
        args.append("--process")
    rc = main([*args, "--", str(root / case.data)])
    cap = capsys.readouterr()
    return rc, cap.out, cap.err


def _missing(patterns, text):
    return [p for p in patterns if not re.search(p, text)]


def _check_all(corpus, template, tmp_path, capsys, expect, check):
    """Run ``check(root, case, db_path, db, capsys) -> problems`` on every case of one kind
    against a fresh copy of the template database; fail once, listing every case."""
    root, cases = corpus
    chosen = [c for c in cases if c.expect == expect]
    assert chosen, f"no {expect!r} cases in the corpus"
    failures = []
    for case in chosen:
        path, db = _fresh_db(template, tmp_path, case.name)
        try:
            problems = check(root, case, path, db, capsys)
        finally:
            db.dispose()
        if problems:
            failures.append(f"{case.name} ({case.what}): {'; '.join(problems)}")
    assert not failures, "\n".join(failures)


def _refused(root, case, path, db, capsys):
    before = db_fingerprint(db)
    rc, out, err = _import(root, case, path, capsys)
    lines = err.strip().splitlines()
    problems = []
    if rc != 1:
        problems.append(f"exit {rc}")
    if len(lines) != 1 or not ERROR.match(lines[0]):
        problems.append(f"stderr is not one error line: {err!r}")
    if out.strip():
        problems.append(f"stdout: {out!r}")
    if miss := _missing(case.match, err):
        problems.append(f"message lacks {miss}: {err.strip()!r}")
    if db_fingerprint(db) != before:
        problems.append("database changed")
    return problems


def _warned(root, case, path, db, capsys):
    rc, out, err = _import(root, case, path, capsys)
    if rc != 0:
        return [f"exit {rc}: {err.strip()!r}"]
    run_id = int(out.strip())
    with db.read() as conn:
        recorded = " | ".join(run_warnings(conn, run_id))
        state = q.get_run(conn, run_id).state
    problems = []
    if miss := _missing(case.match, recorded):
        problems.append(f"recorded warnings lack {miss}: {recorded!r}")
    if miss := _missing(case.match, err):
        problems.append(f"printed warnings lack {miss}: {err!r}")
    if state != "complete":
        problems.append(f"state {state!r}")
    return problems


def _process_fails(root, case, path, db, capsys):
    rc, out, err = _import(root, case, path, capsys)
    errors = [ln for ln in err.strip().splitlines() if ERROR.match(ln)]
    problems = []
    if rc != 1:
        problems.append(f"exit {rc}")
    if len(errors) != 1 or not ERROR.match(err.strip().splitlines()[-1]):
        problems.append(f"not one error line, last: {err!r}")
    if miss := _missing(case.match, err):
        problems.append(f"message lacks {miss}: {err.strip()!r}")
    with db.read() as conn:
        new = [r for r in q.list_runs(conn) if r.label != "good"]
    if len(new) != 1:
        return [*problems, f"{len(new)} new runs"]
    run = new[0]
    if run.state != "complete" or run.processed:
        problems.append(f"state {run.state!r}, processed {run.processed}")
    if f"imported as run {run.id} but not processed" not in err:
        problems.append(f"error does not name the run: {err!r}")
    # a retry fails the same way and writes nothing
    before = db_fingerprint(db)
    rc2 = main(["process", str(run.id), "--db", str(path), "--quiet"])
    err2 = capsys.readouterr().err
    if rc2 != 1 or db_fingerprint(db) != before:
        problems.append(f"retry: exit {rc2}, database changed or {err2!r}")
    if miss := _missing(case.match, err2):
        problems.append(f"retry message lacks {miss}: {err2!r}")
    return problems


def _process_warned(root, case, path, db, capsys):
    rc, out, err = _import(root, case, path, capsys)
    if rc != 0:
        return [f"exit {rc}: {err.strip()!r}"]
    run_id = int(out.strip().splitlines()[-1])
    with db.read() as conn:
        proc = q.load_processing(conn, run_id)
    recorded = " | ".join([*proc.warnings, *(proc.findings or {}).get("warnings", [])])
    if miss := _missing(case.match, recorded):
        return [f"recorded warnings lack {miss}: {recorded!r}"]
    return []


class TestCorpus:
    def test_corpus_is_broad(self, corpus):
        _, cases = corpus
        assert len(cases) >= 40
        assert len({c.name for c in cases}) == len(cases)
        kinds = Counter(c.name.split("_")[0] for c in cases)
        for reader in ("csv", "wav", "h5", "pq", "mdf", "toml", "name"):
            assert kinds[reader] >= 5, (reader, kinds)
        assert {c.expect for c in cases} == {"refused", "warned", "process_fails",
                                             "process_warned"}

    def test_refused_cases_exit_1_with_one_line_and_leave_the_database(
            self, corpus, template, tmp_path, capsys):
        _check_all(corpus, template, tmp_path, capsys, "refused", _refused)

    def test_doubtful_data_is_imported_with_the_warning_recorded(
            self, corpus, template, tmp_path, capsys):
        _check_all(corpus, template, tmp_path, capsys, "warned", _warned)

    @pytest.mark.parametrize("name, machine", [
        ("good.csv", "machine.toml"), ("good.wav", "machine_wav.toml"),
        ("good.h5", "machine.toml"), ("good.parquet", "machine.toml"),
        ("good.mf4", "machine.toml")])
    def test_good_files_import_without_warnings(self, corpus, tmp_path, capsys, name, machine):
        # the undamaged sources of the cases: 16-bit PCM and float samples with noise are
        # neither clipped nor flat, so every refusal above is the damage's doing
        root, _ = corpus
        db_path = tmp_path / "good.sqlite"
        assert main(["import", "--machine", str(root / machine), "--db", str(db_path),
                     "--quiet", "--", str(root / name)]) == 0
        assert capsys.readouterr().err == ""
        db = open_database(str(db_path), create=True)
        with db.read() as conn:
            (run,) = q.list_runs(conn)
            assert run_warnings(conn, run.id) == [] and run.state == "complete"
        db.dispose()

    def test_processing_failure_leaves_the_run_imported_and_unprocessed(
            self, corpus, template, tmp_path, capsys):
        _check_all(corpus, template, tmp_path, capsys, "process_fails", _process_fails)

    def test_doubtful_processing_is_warned_and_recorded(self, corpus, template, tmp_path,
                                                        capsys):
        _check_all(corpus, template, tmp_path, capsys, "process_warned", _process_warned)
