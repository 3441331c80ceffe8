"""64-bit sample counts and indexes on PostgreSQL

SQLite's INTEGER is already 64-bit, so nothing changes there (no table is rebuilt and no
data is touched). On PostgreSQL the columns become BIGINT in place.

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-01 18:40:00
"""
from alembic import op
import sqlalchemy as sa

revision = '0003'
down_revision = '0002'
branch_labels = None
depends_on = None

COLUMNS = [("run", "n_samples"), ("channel", "n_samples"), ("waveform_chunk", "start_index"),
           ("waveform_chunk", "n_samples"), ("live_status", "n_samples")]


def _columns():
    insp = sa.inspect(op.get_bind())
    tables = set(insp.get_table_names())
    for table, column in COLUMNS:
        if table in tables and column in {c["name"] for c in insp.get_columns(table)}:
            yield table, column


def upgrade() -> None:
    if op.get_bind().dialect.name == "sqlite":
        return
    for table, column in _columns():
        op.alter_column(table, column, type_=sa.BigInteger(), existing_type=sa.Integer())


def downgrade() -> None:
    if op.get_bind().dialect.name == "sqlite":
        return
    for table, column in _columns():
        op.alter_column(table, column, type_=sa.Integer(), existing_type=sa.BigInteger())
