"""block axes: the block times and speeds of a run's processed tracks stored once

One new table. Processed tracks written from now on leave their own ``time_s`` and
``speed_rpm`` empty and share the run's row of ``block_axes``; tracks written before keep
theirs and are read as they are (no data rewritten).

Revision ID: 0007
Revises: 0006
Create Date: 2026-12-03 12:40:00
"""
from alembic import op
import sqlalchemy as sa


revision = '0007'
down_revision = '0006'
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table('block_axes',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('run_id', sa.Integer(), nullable=False),
    sa.Column('n', sa.Integer(), nullable=False),
    sa.Column('time_s', sa.LargeBinary(), nullable=False, comment='float64, block centre times'),
    sa.Column('speed_rpm', sa.LargeBinary(), nullable=False, comment='float64, block mean speeds'),
    sa.ForeignKeyConstraint(['run_id'], ['run.id'], name=op.f('fk_block_axes_run_id_run'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_block_axes')),
    sa.UniqueConstraint('run_id', name=op.f('uq_block_axes_run_id'))
    )


def downgrade() -> None:
    # the processed tracks written since need their axes back: copy them into the rows
    op.execute(
        "UPDATE vector_track SET time_s = (SELECT b.time_s FROM block_axes b "
        "WHERE b.run_id = vector_track.run_id), speed_rpm = (SELECT b.speed_rpm "
        "FROM block_axes b WHERE b.run_id = vector_track.run_id) "
        "WHERE length(time_s) = 0 AND source = 'processed'")
    op.drop_table('block_axes')
