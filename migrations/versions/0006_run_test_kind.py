"""run test kind: field, shop-test (mechanical running test) or trip-test

One new column on ``run`` with a server default, so existing runs read as field runs
(no data rewritten).

Revision ID: 0006
Revises: 0005
Create Date: 2026-12-02 02:50:00
"""
from alembic import op
import sqlalchemy as sa


revision = '0006'
down_revision = '0005'
branch_labels = None
depends_on = None


def upgrade() -> None:
    # a plain ADD COLUMN (SQLite allows it with a constant default): no table rebuild,
    # so no row of run, or of the tables that refer to it, is touched
    op.add_column("run", sa.Column("test_kind", sa.String(length=20), nullable=False,
                                   server_default="field",
                                   comment="field, shop-test, trip-test"))


def downgrade() -> None:
    # DROP COLUMN in place (SQLite 3.35 and later; PostgreSQL): a batch rebuild of run
    # would cascade into its children when foreign keys are on
    op.drop_column("run", "test_kind")
