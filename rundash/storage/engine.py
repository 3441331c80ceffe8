"""Engine and session setup: the only place that knows the database dialect.

``open_database(url_or_path, create=False, upgrade=True)`` returns a :class:`Database`:
an engine whose SQLite connections run in WAL mode with foreign keys on and a busy
timeout. Any SQLAlchemy URL works; a plain path means SQLite. PostgreSQL
(``postgresql+psycopg://user@host/db``; a bare ``postgresql://`` URL is taken to mean the
psycopg driver) runs the same models and revisions; there, read-then-write races are
closed with transaction-scoped advisory locks (:func:`lock_key`).

What opening does, decided before anything is written:

- a SQLite file that does not exist is created only with ``create=True`` (else
  :class:`~rundash.errors.NotFoundError`: a mistyped path never leaves an empty database
  behind); a server database must exist already (``createdb``); an empty one (or an empty
  SQLite file) receives the schema;
- a database holding tables but no rundash schema revision is another program's and is
  refused, never adopted;
- a schema revision this rundash does not know means a newer rundash made the database:
  refused, saying so;
- an older schema is upgraded in place with ``upgrade=True`` (the default; ``log`` is told
  "from -> to" first), or refused with ``upgrade=False``.

A write transaction on SQLite waits for the write lock up to ``lock_wait_s`` (default
:data:`WRITE_LOCK_WAIT_S`, or ``$RUNDASH_LOCK_WAIT_S``), telling ``on_lock_wait`` how long
it has waited, then fails with one line saying another writer holds the lock.
"""

from __future__ import annotations

import hashlib
import os
import sqlite3
import time
from contextlib import contextmanager
from contextvars import ContextVar
from dataclasses import dataclass
from importlib import resources
from pathlib import Path
from typing import Callable, Iterator

from sqlalchemy import Connection, create_engine, event, inspect, text
from sqlalchemy.engine import Engine, make_url
from sqlalchemy.exc import OperationalError, SQLAlchemyError

from rundash.errors import NoDatabaseError, NotFoundError, StorageError

DEFAULT_DB = "rundash.sqlite"
BUSY_TIMEOUT_MS = 15000
#: How long a write transaction waits for SQLite's write lock before giving up (s).
WRITE_LOCK_WAIT_S = 600.0
LOCK_WAIT_ENV = "RUNDASH_LOCK_WAIT_S"
_LOCK_STEP_MS = 500
_LOCK_WAIT_LISTENER: ContextVar[Callable[[float, float], None] | None] = ContextVar(
    "rundash_lock_wait_listener", default=None)
#: Tables every rundash schema has: a database with these and an unknown revision was
#: made by a newer rundash, one without them belongs to another program.
_RUNDASH_TABLES = {"machine", "run", "channel"}


def resolve_db(db: str | None) -> str:
    """Database location: the ``--db`` value, then ``RUNDASH_DB``, then ./rundash.sqlite."""
    return db or os.environ.get("RUNDASH_DB") or DEFAULT_DB


def to_url(db: str) -> str:
    """A SQLAlchemy URL for a URL or a file path (``postgresql://`` means psycopg 3)."""
    if "://" in db:
        for bare in ("postgresql://", "postgres://"):
            if db.startswith(bare):
                return "postgresql+psycopg://" + db[len(bare):]
        return db
    return "sqlite:///" + str(Path(db).expanduser().absolute())



def _sqlite_setup(engine: Engine) -> None:
    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_conn, _record):  # pragma: no cover - exercised by every test
        # Take transaction control away from the driver so BEGIN is ours to emit.
        dbapi_conn.isolation_level = None
        cur = dbapi_conn.cursor()
        cur.execute(f"PRAGMA busy_timeout = {BUSY_TIMEOUT_MS}")
        # 64 KiB pages for a new file (no effect on an existing one): the sample chunks
        # and result arrays are blobs of 100 kB and more, which then span 16 x fewer
        # overflow pages (measured: saving a run's 295 MB of tracks 4-7 x faster)
        cur.execute("PRAGMA page_size = 65536")  # a literal: no SQL is built from strings
        cur.execute("PRAGMA journal_mode = WAL")
        cur.execute("PRAGMA synchronous = NORMAL")
        cur.execute("PRAGMA foreign_keys = ON")
        cur.close()

    @event.listens_for(engine, "begin")
    def _on_begin(conn: Connection):
        # A write transaction must take the write lock at its start: a deferred
        # transaction that later upgrades to a write fails at once in WAL mode.
        opts = conn.get_execution_options()
        if opts.get("rundash_write"):
            wait_s, report, shown = opts.get("rundash_lock_wait",
                                             (WRITE_LOCK_WAIT_S, None, "the database"))
            _begin_immediate(conn.connection.dbapi_connection, wait_s, report, shown)
        else:
            conn.exec_driver_sql("BEGIN")


def _begin_immediate(raw, wait_s: float, report, shown: str) -> None:
    """``BEGIN IMMEDIATE``, retried in short steps for up to ``wait_s`` seconds while another
    connection holds the write lock; ``report(waited_s, wait_s)`` after every step."""
    t0 = time.monotonic()
    raw.execute(f"PRAGMA busy_timeout = {_LOCK_STEP_MS}")
    try:
        while True:
            try:
                raw.execute("BEGIN IMMEDIATE")
                return
            except sqlite3.OperationalError as exc:
                if "locked" not in str(exc) and "busy" not in str(exc):
                    raise
                waited = time.monotonic() - t0
                if waited >= wait_s:
                    raise StorageError(
                        f"{shown} stayed locked by another writer for {waited:.0f} s (a rundash "
                        "import, process, record or sync, or another program writing to the "
                        f"file); nothing was written. Try again when it has finished, or wait "
                        f"longer with {LOCK_WAIT_ENV}") from None
                if report is not None:
                    report(waited, wait_s)
    finally:
        raw.execute(f"PRAGMA busy_timeout = {BUSY_TIMEOUT_MS}")


def lock_key(conn: Connection, key: str) -> None:
    """Serialise concurrent writers on ``key`` until the current transaction ends.

    SQLite write transactions are already serial (``BEGIN IMMEDIATE``), so this does
    nothing there. On PostgreSQL (READ COMMITTED) two writers could both check "is this
    hash stored yet?" before either commits; a transaction-scoped advisory lock on the key
    makes the second wait for the first to commit, after which its check sees the row.
    """
    if conn.dialect.name != "postgresql":
        return
    h = int.from_bytes(hashlib.sha256(key.encode("utf-8")).digest()[:8], "big", signed=True)
    conn.execute(text("SELECT pg_advisory_xact_lock(:k)"), {"k": h})


def migrations_dir() -> Path:
    """Where the Alembic environment lives (shipped as the package rundash.migrations)."""
    return Path(str(resources.files("rundash.migrations")))


@dataclass
class Database:
    """An open database: the engine, and transactions on it.

    ``lock_wait_s`` bounds how long a write transaction waits for SQLite's write lock;
    ``on_lock_wait(waited_s, limit_s)``, when set, hears about the wait about twice a second.
    """

    engine: Engine
    url: str
    lock_wait_s: float = WRITE_LOCK_WAIT_S
    on_lock_wait: Callable[[float, float], None] | None = None

    @property
    def shown(self) -> str:
        """The URL for messages (no password; a SQLite file as its path)."""
        return _shown(self.url)

    @contextmanager
    def read(self) -> Iterator[Connection]:
        """A read transaction."""
        with _said(self.shown):
            with self.engine.connect() as conn:
                with conn.begin():
                    yield conn

    @contextmanager
    def write(self) -> Iterator[Connection]:
        """A write transaction (BEGIN IMMEDIATE on SQLite, waiting up to ``lock_wait_s`` for
        another writer): commits whole or not at all."""
        report = _LOCK_WAIT_LISTENER.get() or self.on_lock_wait
        opts = dict(rundash_write=True,
                    rundash_lock_wait=(self.lock_wait_s, report, self.shown))
        with _said(self.shown):
            with self.engine.connect().execution_options(**opts) as conn:
                with conn.begin():
                    yield conn

    def dispose(self) -> None:
        self.engine.dispose()


@contextmanager
def hearing_lock_waits(report: Callable[[float, float], None]) -> Iterator[None]:
    """Within the block (in this thread), write transactions tell ``report(waited_s,
    limit_s)`` while they wait for another writer's lock, instead of the database's own
    ``on_lock_wait`` (a dashboard job shows it in its status line)."""
    token = _LOCK_WAIT_LISTENER.set(report)
    try:
        yield
    finally:
        _LOCK_WAIT_LISTENER.reset(token)


def _shown(url: str) -> str:
    u = make_url(url)
    if u.get_backend_name() == "sqlite" and u.database:
        return u.database
    return u.render_as_string(hide_password=True)


# What the database itself refuses, said in one line (the rest stays a traceback: a bug).
_REFUSALS = ("database is locked", "readonly database", "disk is full", "disk I/O error",
             "unable to open database file")


@contextmanager
def _said(shown: str) -> Iterator[None]:
    try:
        yield
    except OperationalError as exc:
        first = str(exc.orig).splitlines()[0] if exc.orig is not None else str(exc)
        if any(r in first for r in _REFUSALS):
            raise StorageError(f"{shown}: the database refused the operation: {first}") from exc
        raise


#: The newest revision under ``migrations/versions`` (a test checks it is Alembic's head):
#: a database already at it is opened without loading Alembic and parsing the revision
#: files (a third of a second of every command's start). A new revision changes it.
HEAD_REVISION = "0007"


def _script():
    from alembic.config import Config
    from alembic.script import ScriptDirectory

    cfg = Config()
    cfg.set_main_option("script_location", str(migrations_dir()))
    return cfg, ScriptDirectory.from_config(cfg)


def head_revision() -> str:
    """The newest schema revision this rundash knows."""
    return _script()[1].get_current_head()


def _tables_and_revision(engine: Engine, shown: str) -> tuple[set[str], str | None]:
    """The database's table names and Alembic revision, read without changing anything
    (a SQLite file is read through a read-only connection, before the WAL pragma would
    rewrite its header)."""
    u = engine.url
    if engine.dialect.name == "sqlite" and u.database and u.database != ":memory:" \
            and not u.database.startswith("file:") and Path(u.database).exists():
        try:
            with sqlite3.connect(f"{Path(u.database).absolute().as_uri()}?mode=ro",
                                 uri=True) as raw:
                tables = {r[0] for r in raw.execute(
                    "SELECT name FROM sqlite_master WHERE type = 'table' "
                    "AND name NOT LIKE 'sqlite_%'")}
                current = None
                if "alembic_version" in tables:
                    row = raw.execute("SELECT version_num FROM alembic_version").fetchone()
                    current = row[0] if row else None
            raw.close()
        except sqlite3.DatabaseError as exc:
            raise StorageError(f"{shown} is not a database rundash can open ({exc}); expected "
                               "a SQLite file made by rundash") from None
        return tables, current
    from alembic.runtime.migration import MigrationContext

    with engine.connect() as conn:
        tables = set(inspect(conn).get_table_names())
        current = MigrationContext.configure(conn).get_current_revision()
        conn.rollback()
    return tables, current


def _schema_state(engine: Engine, shown: str) -> str | None:
    """The database's revision (None for an empty database); refuses a database that is
    not rundash's and one made by a newer rundash."""
    tables, current = _tables_and_revision(engine, shown)
    if current is None:
        others = sorted(tables - {"alembic_version"})
        if others:
            listed = ", ".join(others[:5]) + (", ..." if len(others) > 5 else "")
            raise StorageError(
                f"{shown} is not a rundash database: it holds {len(others)} table(s) of "
                f"another program ({listed}) and no rundash schema revision; rundash adds "
                "its tables only to a new or empty database")
        return None
    if current == HEAD_REVISION:  # known: the newest revision (Alembic not loaded)
        return current
    from alembic.util.exc import CommandError

    _, script = _script()
    try:
        known = script.get_revision(current) is not None
    except CommandError:
        known = False
    if not known:
        head = script.get_current_head()
        if _RUNDASH_TABLES <= tables:
            from rundash import __version__
            raise StorageError(
                f"{shown} was made by a newer rundash: its schema revision {current!r} is "
                f"unknown to rundash {__version__}, which knows revisions up to {head!r}; "
                "open it with the newer rundash (nothing was changed)")
        raise StorageError(f"{shown} is not a rundash database: its schema revision "
                           f"{current!r} belongs to another program (nothing was changed)")
    return current


def upgrade_schema(engine: Engine) -> None:
    """Bring the schema to the newest revision (never destroys user data)."""
    from alembic import command
    from alembic.runtime.migration import MigrationContext

    cfg, script = _script()
    head = script.get_current_head()
    with engine.connect() as conn:
        current = MigrationContext.configure(conn).get_current_revision()
    if current == head:
        return
    with engine.connect() as conn:
        sqlite = engine.dialect.name == "sqlite"
        if engine.dialect.name == "postgresql":
            # several processes (Dask workers) may open a new database at once: one
            # upgrades, the others wait and then find it at head
            conn.exec_driver_sql("SELECT pg_advisory_lock(7234001)")
            conn.commit()
            if MigrationContext.configure(conn).get_current_revision() == head:
                conn.rollback()
                conn.exec_driver_sql("SELECT pg_advisory_unlock(7234001)")
                conn.commit()
                return
        if sqlite:
            # A batch migration that recreates a parent table would cascade-delete child
            # rows with foreign keys on: switch them off (outside a transaction) first.
            conn.exec_driver_sql("PRAGMA foreign_keys = OFF")
        cfg.attributes["connection"] = conn
        command.upgrade(cfg, "head")
        conn.commit()
        if sqlite:
            bad = conn.exec_driver_sql("PRAGMA foreign_key_check").fetchall()
            conn.exec_driver_sql("PRAGMA foreign_keys = ON")
            if bad:
                raise StorageError(f"foreign key check failed after upgrade: {bad[:5]}")
        if engine.dialect.name == "postgresql":
            conn.exec_driver_sql("SELECT pg_advisory_unlock(7234001)")
            conn.commit()


def open_database(db: str | None = None, *, create: bool = False, upgrade: bool = True,
                  log: Callable[[str], None] | None = None,
                  lock_wait_s: float | None = None) -> Database:
    """Open the database named by ``db`` (see :func:`resolve_db`).

    Parameters
    ----------
    db : str, optional
        A file path (SQLite) or a SQLAlchemy URL.
    create : bool
        Make a new SQLite file when none exists at the path. Without it a missing file is
        a :class:`~rundash.errors.NotFoundError` and nothing is created.
    upgrade : bool
        Migrate an older schema to the newest revision in place (``log`` hears "from ->
        to" before it starts). With False an older schema is a
        :class:`~rundash.errors.StorageError` and the database is left as it is.
    log : callable, optional
        Told, in one line, what opening changes (an upgrade).
    lock_wait_s : float, optional
        How long write transactions wait for SQLite's write lock (default
        ``$RUNDASH_LOCK_WAIT_S``, else :data:`WRITE_LOCK_WAIT_S`).

    Raises
    ------
    NoDatabaseError
        The SQLite file does not exist and ``create`` is False.
    NotFoundError
        The SQLite file's folder does not exist.
    StorageError
        The database cannot be reached, holds another program's tables, was made by a
        newer rundash, or has an older schema and ``upgrade`` is False.
    """
    url = to_url(resolve_db(db))
    shown = _shown(url)
    if lock_wait_s is None:
        env = os.environ.get(LOCK_WAIT_ENV)
        try:
            lock_wait_s = float(env) if env else WRITE_LOCK_WAIT_S
        except ValueError:
            raise StorageError(f"Invalid value for {LOCK_WAIT_ENV!r}: allowed a number of "
                               f"seconds, got {env!r}") from None
    try:
        u = make_url(url)
        if u.get_backend_name() == "sqlite" and u.database and u.database != ":memory:" \
                and not u.database.startswith("file:"):
            path = Path(u.database)
            if not path.parent.exists():
                raise NotFoundError(f"database folder does not exist: {path.parent}")
            if path.is_dir():
                raise StorageError(f"{path}: a folder, not a database file")
            if not path.exists() and not create:
                raise NoDatabaseError(f"no database at {path}: the file does not exist "
                                      "(check the path; a new database is made only when "
                                      "asked, create=True)", str(path))
        try:
            # SQLite: no statement cache. A cached statement keeps the copy SQLite made of
            # each blob bound to it until the statement runs again, so every large array
            # written (a 2-hour run's speed profile, block axes and tracks: 6-18 MB each)
            # stayed in memory to the end of the process; preparing a statement costs
            # microseconds.
            engine = create_engine(url, **({"pool_pre_ping": True}
                                           if u.get_backend_name() == "postgresql" else
                                           {"connect_args": {"cached_statements": 0}}
                                           if u.get_backend_name() == "sqlite" else {}))
        except ModuleNotFoundError as exc:
            raise StorageError(f"cannot open database {u.render_as_string(hide_password=True)}"
                               f": its driver is not installed ({exc.name}); for PostgreSQL "
                               "install rundash[postgres] (psycopg 3)") from None
        if engine.dialect.name == "sqlite":
            _sqlite_setup(engine)
        current = _schema_state(engine, shown)
        head = HEAD_REVISION if current == HEAD_REVISION else head_revision()
        if current is not None and current != head:
            if not upgrade:
                engine.dispose()
                raise StorageError(
                    f"{shown} has an older rundash schema (revision {current!r}); this rundash "
                    f"needs {head!r}: open it with upgrade=True to migrate it in place (no "
                    "revision destroys data; copy the file first to keep the old one)")
            if log is not None:
                log(f"upgrading the database schema of {shown} from revision {current!r} to "
                    f"{head!r} (in place; no revision destroys data)")
        if current != head:
            upgrade_schema(engine)
        with engine.connect() as conn:
            conn.execute(text("SELECT 1"))
    except SQLAlchemyError as exc:
        raise StorageError(f"cannot open database {shown}: {exc.__class__.__name__}: "
                           f"{str(exc).splitlines()[0] if str(exc) else ''}") from exc
    return Database(engine=engine, url=url, lock_wait_s=float(lock_wait_s))
