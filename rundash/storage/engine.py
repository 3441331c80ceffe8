"""Engine and session setup: the only place that knows the database dialect.

``open_database(url_or_path)`` returns a :class:`Database`: an engine whose SQLite
connections run in WAL mode with foreign keys on and a busy timeout, upgraded to the
newest Alembic revision on opening. Any SQLAlchemy URL works; a plain path means SQLite.
PostgreSQL (``postgresql+psycopg://user@host/db``; a bare ``postgresql://`` URL is taken
to mean the psycopg driver) runs the same models and revisions; there, read-then-write
races are closed with transaction-scoped advisory locks (:func:`lock_key`).
"""

from __future__ import annotations

import hashlib
import os
from contextlib import contextmanager
from dataclasses import dataclass
from importlib import resources
from pathlib import Path
from typing import Iterator

from sqlalchemy import Connection, create_engine, event, text
from sqlalchemy.engine import Engine, make_url
from sqlalchemy.exc import SQLAlchemyError

from rundash.errors import StorageError

DEFAULT_DB = "rundash.sqlite"
BUSY_TIMEOUT_MS = 15000


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
        cur.execute("PRAGMA journal_mode = WAL")
        cur.execute("PRAGMA synchronous = NORMAL")
        cur.execute("PRAGMA foreign_keys = ON")
        cur.close()

    @event.listens_for(engine, "begin")
    def _on_begin(conn: Connection):
        # A write transaction must take the write lock at its start: a deferred
        # transaction that later upgrades to a write fails at once in WAL mode.
        if conn.get_execution_options().get("rundash_write"):
            conn.exec_driver_sql("BEGIN IMMEDIATE")
        else:
            conn.exec_driver_sql("BEGIN")


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
    """An open database: the engine, and transactions on it."""

    engine: Engine
    url: str

    @property
    def is_sqlite(self) -> bool:
        return self.engine.dialect.name == "sqlite"

    @contextmanager
    def read(self) -> Iterator[Connection]:
        """A read transaction."""
        with self.engine.connect() as conn:
            with conn.begin():
                yield conn

    @contextmanager
    def write(self) -> Iterator[Connection]:
        """A write transaction (BEGIN IMMEDIATE on SQLite): commits whole or not at all."""
        with self.engine.connect().execution_options(rundash_write=True) as conn:
            with conn.begin():
                yield conn

    def dispose(self) -> None:
        self.engine.dispose()


def upgrade(engine: Engine) -> None:
    """Bring the schema to the newest revision (never destroys user data)."""
    from alembic import command
    from alembic.config import Config
    from alembic.runtime.migration import MigrationContext
    from alembic.script import ScriptDirectory

    cfg = Config()
    cfg.set_main_option("script_location", str(migrations_dir()))
    script = ScriptDirectory.from_config(cfg)
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


def open_database(db: str | None = None, *, upgrade_schema: bool = True) -> Database:
    """Open (and create or upgrade) the database named by ``db`` (see :func:`resolve_db`)."""
    url = to_url(resolve_db(db))
    try:
        u = make_url(url)
        if u.get_backend_name() == "sqlite" and u.database and u.database != ":memory:":
            parent = Path(u.database).parent
            if not parent.exists():
                raise StorageError(f"database folder does not exist: {parent}")
        try:
            engine = create_engine(url, **({"pool_pre_ping": True}
                                           if u.get_backend_name() == "postgresql" else {}))
        except ModuleNotFoundError as exc:
            raise StorageError(f"cannot open database {u.render_as_string(hide_password=True)}"
                               f": its driver is not installed ({exc.name}); for PostgreSQL "
                               "install rundash[postgres] (psycopg 3)") from None
        if engine.dialect.name == "sqlite":
            _sqlite_setup(engine)
        if upgrade_schema:
            upgrade(engine)
        with engine.connect() as conn:
            conn.execute(text("SELECT 1"))
    except SQLAlchemyError as exc:
        shown = make_url(url).render_as_string(hide_password=True)
        raise StorageError(f"cannot open database {shown}: {exc.__class__.__name__}: "
                           f"{str(exc).splitlines()[0] if str(exc) else ''}") from exc
    return Database(engine=engine, url=url)
