import pytest
from sqlalchemy import text

from rundash.errors import StorageError
from rundash.storage.engine import BUSY_TIMEOUT_MS, open_database, resolve_db


class TestOpenDatabase:
    @pytest.mark.sqlite_only  # SQLite's own pragmas
    def test_every_connection_has_wal_foreign_keys_and_busy_timeout(self, db):
        for _ in range(2):
            with db.engine.connect() as conn:
                assert conn.exec_driver_sql("PRAGMA journal_mode").scalar() == "wal"
                assert conn.exec_driver_sql("PRAGMA foreign_keys").scalar() == 1
                assert conn.exec_driver_sql("PRAGMA busy_timeout").scalar() == BUSY_TIMEOUT_MS

    def test_write_transaction_rolls_back_whole(self, db):
        with pytest.raises(RuntimeError):
            with db.write() as conn:
                conn.execute(text("INSERT INTO machine (name, kind, rated_speed_rpm, "
                                  "min_operating_speed_rpm, max_continuous_speed_rpm, profile, "
                                  "rotation, description, tach_column, tach_pulses_per_rev, "
                                  "tach_edge, tach_angle_deg, created_at) VALUES ('m', 'fan', 1, "
                                  "1, 1, 'p', 'cw', '', 't', 1, 'rising', 0, '2026-01-01')"))
                raise RuntimeError("boom")
        with db.read() as conn:
            assert conn.execute(text("SELECT count(*) FROM machine")).scalar() == 0

    def test_missing_folder_is_a_clear_error(self, tmp_path):
        with pytest.raises(StorageError, match="database folder does not exist"):
            open_database(str(tmp_path / "nope" / "x.sqlite"))


class TestResolveDb:
    def test_order_option_then_environment_then_default(self, monkeypatch):
        monkeypatch.setenv("RUNDASH_DB", "/env.sqlite")
        assert resolve_db("opt.sqlite") == "opt.sqlite"
        assert resolve_db(None) == "/env.sqlite"
        monkeypatch.delenv("RUNDASH_DB")
        assert resolve_db(None) == "rundash.sqlite"


# ----------------------------------------------------------------------------- opening rules
import sqlite3  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import threading  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

from sqlalchemy import create_engine  # noqa: E402

from rundash.cli import main  # noqa: E402
from rundash.errors import NoDatabaseError  # noqa: E402
from rundash.storage.engine import head_revision  # noqa: E402


def _tables(url_or_path):
    from sqlalchemy import inspect as sa_inspect
    url = url_or_path if "://" in url_or_path else f"sqlite:///{url_or_path}"
    eng = create_engine(url)
    try:
        with eng.connect() as conn:
            return sorted(sa_inspect(conn).get_table_names())
    finally:
        eng.dispose()


def _one_error_line(capsys, command):
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith(f"rundash {command}: error: "), err
    return err[0]


class TestMissingDatabase:
    def test_a_missing_file_is_refused_unless_create(self, tmp_path):
        path = tmp_path / "typo.sqlite"
        with pytest.raises(NoDatabaseError, match=r"no database at .*typo\.sqlite: the file "
                                                  r"does not exist.*create=True"):
            open_database(str(path))
        assert not path.exists()
        db = open_database(str(path), create=True)
        db.dispose()
        assert path.exists()
        open_database(str(path)).dispose()  # it exists now: no flag needed

    @pytest.mark.parametrize("command", [["runs"], ["machines"], ["findings", "1"],
                                         ["process", "1"], ["compare", "1", "2"],
                                         ["serve", "--port", "1"]])
    def test_read_commands_on_a_missing_file_say_so_in_one_line(self, tmp_path, capsys,
                                                                command):
        path = tmp_path / "typo.sqlite"
        rc = main([*command, "--db", str(path)])
        line = _one_error_line(capsys, command[0])
        assert rc == 1
        assert f"no database at {path}: the file does not exist" in line
        assert "'rundash import' or 'rundash demo' makes a new one" in line
        assert not path.exists()

    def test_import_creates_it(self, tmp_path, machine_file, capsys):
        from tests.ingest.test_importer import write_csv
        csv = tmp_path / "r.csv"
        write_csv(csv, n=3000)
        path = tmp_path / "new.sqlite"
        assert main(["import", str(csv), "--machine", str(machine_file), "--db", str(path),
                     "--quiet"]) == 0
        assert path.exists() and "database" not in capsys.readouterr().err


class TestForeignDatabase:
    """A database holding another program's tables is never adopted (issue: `rundash runs
    --db other.sqlite` added 13 tables to it)."""

    def test_sqlite_file_of_another_program_is_refused_and_left_alone(self, tmp_path, capsys):
        path = tmp_path / "other.sqlite"
        with sqlite3.connect(path) as c:
            c.execute("CREATE TABLE invoices (id INTEGER PRIMARY KEY, amount REAL)")
            c.execute("INSERT INTO invoices (amount) VALUES (12.5)")
        before = path.read_bytes()
        with pytest.raises(StorageError, match=r"other\.sqlite is not a rundash database: "
                                               r"it holds 1 table\(s\) of another program "
                                               r"\(invoices\)"):
            open_database(str(path))
        rc = main(["runs", "--db", str(path)])
        line = _one_error_line(capsys, "runs")
        assert rc == 1 and "is not a rundash database" in line
        assert _tables(str(path)) == ["invoices"] and path.read_bytes() == before

    def test_server_database_of_another_program_is_refused(self, db_url):
        eng = create_engine(db_url if "://" in db_url else f"sqlite:///{db_url}")
        with eng.begin() as conn:
            conn.execute(text("CREATE TABLE customers (id INTEGER PRIMARY KEY)"))
        eng.dispose()
        with pytest.raises(StorageError, match="is not a rundash database.*customers"):
            open_database(db_url, create=True)
        assert _tables(db_url) == ["customers"]

    def test_an_empty_file_receives_the_schema(self, tmp_path):
        path = tmp_path / "touched.sqlite"
        path.write_bytes(b"")
        open_database(str(path)).dispose()  # it exists: the user named it
        assert "run" in _tables(str(path))


def _stamp(url, revision):
    eng = create_engine(url if "://" in url else f"sqlite:///{url}")
    with eng.begin() as conn:
        conn.execute(text("UPDATE alembic_version SET version_num = :r"), {"r": revision})
    eng.dispose()


class TestSchemaRevisions:
    def test_a_newer_rundash_database_is_refused_saying_so(self, db_url, capsys):
        open_database(db_url, create=True).dispose()
        _stamp(db_url, "0099")
        with pytest.raises(StorageError, match=r"was made by a newer rundash: its schema "
                                               rf"revision '0099' is unknown to rundash .*up "
                                               rf"to '{head_revision()}'"):
            open_database(db_url)
        rc = main(["runs", "--db", db_url])
        assert rc == 1 and "made by a newer rundash" in _one_error_line(capsys, "runs")

    def test_another_programs_alembic_database_is_not_called_a_newer_rundash(self, tmp_path):
        path = tmp_path / "app.sqlite"
        with sqlite3.connect(path) as c:
            c.execute("CREATE TABLE alembic_version (version_num VARCHAR(32) PRIMARY KEY)")
            c.execute("INSERT INTO alembic_version VALUES ('ae1027a6acf')")
            c.execute("CREATE TABLE orders (id INTEGER)")
        with pytest.raises(StorageError, match="not a rundash database: its schema revision "
                                               "'ae1027a6acf' belongs to another program"):
            open_database(str(path))

    @staticmethod
    def _old_database(path, revision="0002"):
        from alembic import command

        from rundash.storage.engine import _script
        eng = create_engine(f"sqlite:///{path}")
        cfg, _ = _script()
        with eng.connect() as conn:
            cfg.attributes["connection"] = conn
            command.upgrade(cfg, revision)
            conn.commit()
        eng.dispose()

    def _revision(self, path):
        with sqlite3.connect(path) as c:
            return c.execute("SELECT version_num FROM alembic_version").fetchone()[0]

    def test_an_older_schema_can_be_declined(self, tmp_path):
        path = tmp_path / "old.sqlite"
        self._old_database(path)
        with pytest.raises(StorageError, match=r"old\.sqlite has an older rundash schema "
                                               r"\(revision '0002'\); this rundash needs "
                                               rf"'{head_revision()}': open it with "
                                               r"upgrade=True"):
            open_database(str(path), upgrade=False)
        assert self._revision(path) == "0002"

    def test_an_upgrade_says_from_and_to(self, tmp_path, capsys):
        path = tmp_path / "old.sqlite"
        self._old_database(path)
        said = []
        open_database(str(path), log=said.append).dispose()
        assert said == [f"upgrading the database schema of {path} from revision '0002' to "
                        f"'{head_revision()}' (in place; no revision destroys data)"]
        assert self._revision(path) == head_revision()
        said.clear()
        open_database(str(path), log=said.append).dispose()
        assert said == []  # at head: nothing to say
        self._old_database(tmp_path / "old2.sqlite")
        assert main(["runs", "--db", str(tmp_path / "old2.sqlite")]) == 0
        err = capsys.readouterr().err
        assert "from revision '0002' to" in err


LOCK_HOLDER = """
import sqlite3, sys, time
c = sqlite3.connect(sys.argv[1], isolation_level=None)
c.execute("BEGIN IMMEDIATE")
print("locked", flush=True)
time.sleep(float(sys.argv[2]))
c.execute("COMMIT")
"""


@pytest.mark.sqlite_only
class TestWriteLock:
    """Another writer holding SQLite's write lock: wait with a stated limit and progress,
    then one line (issue: `database is locked` after 15 s, at the save, as a traceback)."""

    def _hold(self, path, seconds):
        proc = subprocess.Popen([sys.executable, "-c", LOCK_HOLDER, str(path), str(seconds)],
                                stdout=subprocess.PIPE, text=True)
        assert proc.stdout.readline().strip() == "locked"
        return proc

    def test_gives_up_after_the_stated_wait_and_writes_nothing(self, tmp_path):
        path = tmp_path / "l.sqlite"
        db = open_database(str(path), create=True, lock_wait_s=1.5)
        waits = []
        db.on_lock_wait = lambda w, limit: waits.append((w, limit))
        holder = self._hold(path, 30)
        try:
            t0 = time.monotonic()
            with pytest.raises(StorageError, match=r"l\.sqlite stayed locked by another writer "
                                                   r"for [12] s .*nothing was written"):
                with db.write() as conn:
                    conn.execute(text("DELETE FROM machine"))
            took = time.monotonic() - t0
        finally:
            holder.kill()
            holder.wait()
        assert 1.4 < took < 6.0
        assert waits and all(limit == 1.5 for _, limit in waits)
        assert [w for w, _ in waits] == sorted(w for w, _ in waits)
        with db.write() as conn:  # the lock is free again: writing works
            conn.execute(text("DELETE FROM machine"))
        db.dispose()

    def test_waits_for_the_other_writer_and_goes_on(self, tmp_path):
        path = tmp_path / "l.sqlite"
        db = open_database(str(path), create=True, lock_wait_s=30)
        waits = []
        db.on_lock_wait = lambda w, limit: waits.append(w)
        holder = self._hold(path, 2.0)
        try:
            with db.write() as conn:
                conn.execute(text("DELETE FROM machine"))
        finally:
            holder.wait(10)
        assert waits and 1.0 < waits[-1] < 10.0
        db.dispose()

    def test_processing_while_another_writer_holds_the_lock_is_one_line(
            self, tmp_path, machine_file, capsys, monkeypatch):
        from tests.ingest.test_importer import write_csv
        csv = tmp_path / "r.csv"
        write_csv(csv, n=3000)
        path = tmp_path / "p.sqlite"
        assert main(["import", str(csv), "--machine", str(machine_file), "--db", str(path),
                     "--quiet"]) == 0
        capsys.readouterr()
        monkeypatch.setenv("RUNDASH_LOCK_WAIT_S", "2")
        holder = self._hold(path, 60)
        try:
            rc = main(["process", "1", "--db", str(path), "--quiet"])
        finally:
            holder.kill()
            holder.wait()
        err = capsys.readouterr().err
        line = err.strip().splitlines()[-1]
        assert rc == 1 and line.startswith("rundash process: error: ")
        assert "stayed locked by another writer" in line and "RUNDASH_LOCK_WAIT_S" in line
        assert "waiting for" in err and "another writer holds its write lock" in err
        assert "Traceback" not in err


def test_head_revision_constant_is_alembics_head():
    # opening a database at HEAD_REVISION skips Alembic: the constant must follow every
    # new revision, or a database one revision behind would be opened without upgrading
    from rundash.storage.engine import HEAD_REVISION
    assert HEAD_REVISION == head_revision()


def test_opening_a_database_at_head_loads_no_alembic(tmp_path):
    db = tmp_path / "r.sqlite"
    from rundash.storage.engine import open_database
    open_database(str(db), create=True).engine.dispose()
    code = ("import sys; from rundash.storage.engine import open_database; "
            f"open_database({str(db)!r}).engine.dispose(); "
            "print(sorted(m for m in sys.modules if m.split('.')[0] == 'alembic'))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout.strip()
    assert out == "[]"
