"""live monitor: the recorder's status, its vectors batch by batch, and the event log

Three new tables, nothing existing changes (no data touched).

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-01 18:12:22.171895
"""
from alembic import op
import sqlalchemy as sa
import rundash.storage.orm


revision = '0002'
down_revision = '0001'
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table('live_event',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('run_id', sa.Integer(), nullable=False),
    sa.Column('time_s', sa.Float(), nullable=False, comment='record time of the event'),
    sa.Column('speed_rpm', sa.Float(), nullable=True),
    sa.Column('kind', sa.String(length=40), nullable=False),
    sa.Column('severity', sa.String(length=20), nullable=False, comment='info, warning or alarm'),
    sa.Column('message', sa.Text(), nullable=False),
    sa.Column('details', sa.JSON(), nullable=False),
    sa.Column('created_at', rundash.storage.orm.UTCDateTime(), nullable=False),
    sa.ForeignKeyConstraint(['run_id'], ['run.id'], name=op.f('fk_live_event_run_id_run'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_live_event'))
    )
    with op.batch_alter_table('live_event', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_live_event_run_id'), ['run_id'], unique=False)

    op.create_table('live_status',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('run_id', sa.Integer(), nullable=False),
    sa.Column('state', sa.String(length=20), nullable=False, comment='recording, ended or failed'),
    sa.Column('updated_at', rundash.storage.orm.UTCDateTime(), nullable=False, comment='UTC, the heartbeat'),
    sa.Column('time_s', sa.Float(), nullable=False, comment='record time of the last sample'),
    sa.Column('n_samples', sa.Integer(), nullable=False, comment='samples received per channel'),
    sa.Column('speed_rpm', sa.Float(), nullable=True, comment='NULL: no speed yet'),
    sa.Column('accel_rpm_s', sa.Float(), nullable=True, comment='rpm/s; NULL: unknown'),
    sa.Column('tach_ok', sa.Boolean(), nullable=False),
    sa.Column('n_revs', sa.Integer(), nullable=False),
    sa.Column('message', sa.Text(), nullable=False),
    sa.ForeignKeyConstraint(['run_id'], ['run.id'], name=op.f('fk_live_status_run_id_run'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_live_status')),
    sa.UniqueConstraint('run_id', name=op.f('uq_live_status_run_id'))
    )
    op.create_table('live_vector',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('run_id', sa.Integer(), nullable=False),
    sa.Column('channel_id', sa.Integer(), nullable=False),
    sa.Column('order', sa.Float(), nullable=False, comment='1.0 = 1X'),
    sa.Column('seq', sa.Integer(), nullable=False, comment='batch number, from 0'),
    sa.Column('n', sa.Integer(), nullable=False),
    sa.Column('time_s', sa.LargeBinary(), nullable=False, comment='float64, block centre times'),
    sa.Column('speed_rpm', sa.LargeBinary(), nullable=False, comment='float64'),
    sa.Column('amplitude', sa.LargeBinary(), nullable=False, comment='float64, pp (proximity) or pk (seismic)'),
    sa.Column('phase_lag_deg', sa.LargeBinary(), nullable=False, comment='float64, 0 <= lag < 360'),
    sa.Column('direct', sa.LargeBinary(), nullable=False, comment='float64, p-p (displacement) or rms (seismic)'),
    sa.ForeignKeyConstraint(['channel_id'], ['channel.id'], name=op.f('fk_live_vector_channel_id_channel'), ondelete='CASCADE'),
    sa.ForeignKeyConstraint(['run_id'], ['run.id'], name=op.f('fk_live_vector_run_id_run'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_live_vector')),
    sa.UniqueConstraint('run_id', 'seq', 'channel_id', 'order', name=op.f('uq_live_vector_run_id'))
    )
    with op.batch_alter_table('live_vector', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_live_vector_run_id'), ['run_id'], unique=False)



def downgrade() -> None:
    with op.batch_alter_table('live_vector', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_live_vector_run_id'))

    op.drop_table('live_vector')
    op.drop_table('live_status')
    with op.batch_alter_table('live_event', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_live_event_run_id'))

    op.drop_table('live_event')
