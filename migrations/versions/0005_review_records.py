"""review records: the engineer's decisions and sign-offs, appended and never edited

Two new tables; nothing existing changes (no data touched).

Revision ID: 0005
Revises: 0004
Create Date: 2026-12-02 02:50:00
"""
from alembic import op
import sqlalchemy as sa
import rundash.storage.orm


revision = '0005'
down_revision = '0004'
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table('review_decision',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('uid', sa.String(length=32), nullable=False, comment='identity across databases (sync)'),
    sa.Column('run_id', sa.Integer(), nullable=False),
    sa.Column('created_at', rundash.storage.orm.UTCDateTime(), nullable=False, comment='UTC, when decided'),
    sa.Column('reviewer', sa.String(length=200), nullable=False, comment='who decided (as typed)'),
    sa.Column('action', sa.String(length=20), nullable=False),
    sa.Column('probe_name', sa.String(length=200), nullable=False),
    sa.Column('direction', sa.String(length=20), nullable=False),
    sa.Column('target_speed_rpm', sa.Float(), nullable=True, comment='rpm of the automatic critical decided on; NULL: none'),
    sa.Column('target_uid', sa.String(length=32), nullable=True, comment='entry withdrawn'),
    sa.Column('speed_rpm', sa.Float(), nullable=True, comment="engineer's speed, rpm"),
    sa.Column('af', sa.Float(), nullable=True, comment="engineer's AF"),
    sa.Column('reason', sa.String(length=40), nullable=False, comment='reject reason'),
    sa.Column('plot', sa.String(length=20), nullable=False, comment='annotated plot'),
    sa.Column('text', sa.Text(), nullable=False),
    sa.Column('processing_at', rundash.storage.orm.UTCDateTime(), nullable=True, comment='the processing (its time) the entry refers to; NULL: none'),
    sa.Column('changed', sa.JSON(), nullable=False, comment='what the entry changed'),
    sa.ForeignKeyConstraint(['run_id'], ['run.id'], name=op.f('fk_review_decision_run_id_run'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_review_decision')),
    sa.UniqueConstraint('uid', name=op.f('uq_review_decision_uid'))
    )
    with op.batch_alter_table('review_decision', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_review_decision_run_id'), ['run_id'], unique=False)

    op.create_table('sign_off',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('uid', sa.String(length=32), nullable=False, comment='identity across databases (sync)'),
    sa.Column('run_id', sa.Integer(), nullable=False),
    sa.Column('created_at', rundash.storage.orm.UTCDateTime(), nullable=False, comment='UTC, when recorded'),
    sa.Column('name', sa.String(length=200), nullable=False),
    sa.Column('role', sa.String(length=200), nullable=False),
    sa.Column('decision', sa.String(length=40), nullable=False, comment='accepted, accepted with remarks, not accepted'),
    sa.Column('remarks', sa.Text(), nullable=False),
    sa.Column('signed_on', sa.String(length=10), nullable=False, comment='date given, YYYY-MM-DD'),
    sa.Column('processing_at', rundash.storage.orm.UTCDateTime(), nullable=True, comment='the processing (its time) signed; NULL: none'),
    sa.Column('snapshot', sa.JSON(), nullable=False, comment='the reviewed verdict and criticals as signed'),
    sa.ForeignKeyConstraint(['run_id'], ['run.id'], name=op.f('fk_sign_off_run_id_run'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_sign_off')),
    sa.UniqueConstraint('uid', name=op.f('uq_sign_off_uid'))
    )
    with op.batch_alter_table('sign_off', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_sign_off_run_id'), ['run_id'], unique=False)


def downgrade() -> None:
    with op.batch_alter_table('sign_off', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_sign_off_run_id'))
    op.drop_table('sign_off')
    with op.batch_alter_table('review_decision', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_review_decision_run_id'))
    op.drop_table('review_decision')
