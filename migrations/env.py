"""Alembic environment of rundash. The connection comes from rundash.storage.engine."""

from __future__ import annotations

from alembic import context
from sqlalchemy import create_engine

from rundash.storage.orm import Base

config = context.config
target_metadata = Base.metadata


def run_migrations() -> None:
    conn = config.attributes.get("connection")
    if conn is None:  # command-line use: alembic -x url=... upgrade head
        url = context.get_x_argument(as_dictionary=True).get("url") or config.get_main_option(
            "sqlalchemy.url")
        engine = create_engine(url)
        with engine.connect() as c:
            _run(c)
        return
    _run(conn)


def _run(conn) -> None:
    context.configure(
        connection=conn,
        target_metadata=target_metadata,
        render_as_batch=True,
        compare_type=True,
    )
    with context.begin_transaction():
        context.run_migrations()


run_migrations()
