"""initial schema

Revision ID: 0001
Revises: 
Create Date: 2026-12-01 17:49:55.511431
"""
from alembic import op
import sqlalchemy as sa
import rundash.storage.orm


revision = '0001'
down_revision = None
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table('machine',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('name', sa.String(length=200), nullable=False),
    sa.Column('kind', sa.String(length=40), nullable=False),
    sa.Column('rated_speed_rpm', sa.Float(), nullable=False),
    sa.Column('min_operating_speed_rpm', sa.Float(), nullable=False),
    sa.Column('max_continuous_speed_rpm', sa.Float(), nullable=False),
    sa.Column('trip_speed_rpm', sa.Float(), nullable=True, comment='rpm; NULL: not given'),
    sa.Column('profile', sa.String(length=400), nullable=False, comment='guidance profile name or file'),
    sa.Column('rotation', sa.String(length=8), nullable=False, comment='cw or ccw viewed from the driver'),
    sa.Column('description', sa.Text(), nullable=False),
    sa.Column('tach_column', sa.String(length=200), nullable=False),
    sa.Column('tach_pulses_per_rev', sa.Integer(), nullable=False),
    sa.Column('tach_edge', sa.String(length=10), nullable=False),
    sa.Column('tach_threshold', sa.Float(), nullable=True, comment='signal units; NULL: auto'),
    sa.Column('tach_hysteresis', sa.Float(), nullable=True, comment='signal units; NULL: auto'),
    sa.Column('tach_angle_deg', sa.Float(), nullable=False),
    sa.Column('created_at', rundash.storage.orm.UTCDateTime(), nullable=False),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_machine')),
    sa.UniqueConstraint('name', name=op.f('uq_machine_name'))
    )
    op.create_table('probe',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('machine_id', sa.Integer(), nullable=False),
    sa.Column('name', sa.String(length=200), nullable=False),
    sa.Column('column_name', sa.String(length=200), nullable=False, comment='file column or channel'),
    sa.Column('kind', sa.String(length=20), nullable=False, comment='proximity, velocity, acceleration'),
    sa.Column('units', sa.String(length=10), nullable=False, comment='unit the sensitivity refers to'),
    sa.Column('sensitivity_mv_per_unit', sa.Float(), nullable=True, comment='mV per unit; NULL: file holds engineering units'),
    sa.Column('angle_deg', sa.Float(), nullable=False),
    sa.Column('bearing', sa.String(length=100), nullable=False),
    sa.Column('axis', sa.String(length=8), nullable=False),
    sa.Column('pair_name', sa.String(length=200), nullable=True),
    sa.ForeignKeyConstraint(['machine_id'], ['machine.id'], name=op.f('fk_probe_machine_id_machine'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_probe')),
    sa.UniqueConstraint('machine_id', 'name', name=op.f('uq_probe_machine_id'))
    )
    with op.batch_alter_table('probe', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_probe_machine_id'), ['machine_id'], unique=False)

    op.create_table('run',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('machine_id', sa.Integer(), nullable=False),
    sa.Column('started_at', rundash.storage.orm.UTCDateTime(), nullable=True, comment='UTC'),
    sa.Column('kind', sa.String(length=20), nullable=False, comment='run-up, coast-down, mixed, steady'),
    sa.Column('label', sa.String(length=200), nullable=False),
    sa.Column('cycle', sa.String(length=200), nullable=False, comment='overhaul-cycle tag'),
    sa.Column('notes', sa.Text(), nullable=False),
    sa.Column('source_name', sa.String(length=400), nullable=False),
    sa.Column('source_sha256', sa.String(length=64), nullable=False),
    sa.Column('state', sa.String(length=20), nullable=False, comment='importing, complete, incomplete'),
    sa.Column('sample_rate_hz', sa.Float(), nullable=False),
    sa.Column('n_samples', sa.Integer(), nullable=False),
    sa.Column('description_toml', sa.Text(), nullable=False, comment='machine file text used at import'),
    sa.Column('warnings', sa.JSON(), nullable=False),
    sa.Column('imported_at', rundash.storage.orm.UTCDateTime(), nullable=False),
    sa.ForeignKeyConstraint(['machine_id'], ['machine.id'], name=op.f('fk_run_machine_id_machine'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_run'))
    )
    with op.batch_alter_table('run', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_run_machine_id'), ['machine_id'], unique=False)
        batch_op.create_index(batch_op.f('ix_run_source_sha256'), ['source_sha256'], unique=False)

    op.create_table('channel',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('run_id', sa.Integer(), nullable=False),
    sa.Column('position', sa.Integer(), nullable=False),
    sa.Column('name', sa.String(length=200), nullable=False, comment='file column or channel name'),
    sa.Column('role', sa.String(length=10), nullable=False, comment='tach or probe'),
    sa.Column('probe_name', sa.String(length=200), nullable=True),
    sa.Column('kind', sa.String(length=20), nullable=True, comment='transducer kind; NULL for tach'),
    sa.Column('unit', sa.String(length=10), nullable=False, comment='unit of the stored samples'),
    sa.Column('scale', sa.Float(), nullable=False, comment='factor applied to file values'),
    sa.Column('sample_rate_hz', sa.Float(), nullable=False),
    sa.Column('n_samples', sa.Integer(), nullable=False),
    sa.ForeignKeyConstraint(['run_id'], ['run.id'], name=op.f('fk_channel_run_id_run'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_channel')),
    sa.UniqueConstraint('run_id', 'name', name=op.f('uq_channel_run_id'))
    )
    with op.batch_alter_table('channel', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_channel_run_id'), ['run_id'], unique=False)

    op.create_table('finding',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('run_id', sa.Integer(), nullable=False),
    sa.Column('probe_name', sa.String(length=200), nullable=False),
    sa.Column('direction', sa.String(length=20), nullable=False),
    sa.Column('speed_rpm', sa.Float(), nullable=False),
    sa.Column('peak_amplitude', sa.Float(), nullable=True),
    sa.Column('amplitude_units', sa.String(length=20), nullable=False),
    sa.Column('af_half_power', sa.Float(), nullable=True, comment='NULL: not determinable'),
    sa.Column('af_phase', sa.Float(), nullable=True),
    sa.Column('af_fit', sa.Float(), nullable=True),
    sa.Column('damping_ratio_fit', sa.Float(), nullable=True),
    sa.Column('classification', sa.String(length=40), nullable=False),
    sa.Column('confidence', sa.String(length=20), nullable=False),
    sa.Column('mode_hint', sa.String(length=200), nullable=True),
    sa.Column('separation_margin_pct', sa.Float(), nullable=True),
    sa.Column('required_margin_pct', sa.Float(), nullable=True),
    sa.Column('margin_verdict', sa.String(length=20), nullable=False),
    sa.Column('details', sa.JSON(), nullable=False),
    sa.ForeignKeyConstraint(['run_id'], ['run.id'], name=op.f('fk_finding_run_id_run'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_finding'))
    )
    with op.batch_alter_table('finding', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_finding_run_id'), ['run_id'], unique=False)

    op.create_table('processing',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('run_id', sa.Integer(), nullable=False),
    sa.Column('created_at', rundash.storage.orm.UTCDateTime(), nullable=False),
    sa.Column('rundash_version', sa.String(length=40), nullable=False),
    sa.Column('params', sa.JSON(), nullable=False),
    sa.Column('slow_roll_lo_rpm', sa.Float(), nullable=True, comment='NULL: not applied'),
    sa.Column('slow_roll_hi_rpm', sa.Float(), nullable=True, comment='NULL: not applied'),
    sa.Column('tach_report', sa.JSON(), nullable=False),
    sa.Column('segments', sa.JSON(), nullable=False),
    sa.Column('warnings', sa.JSON(), nullable=False),
    sa.Column('findings_json', sa.JSON(), nullable=True, comment="the run's findings and verdicts as the JSON output gives them"),
    sa.ForeignKeyConstraint(['run_id'], ['run.id'], name=op.f('fk_processing_run_id_run'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_processing')),
    sa.UniqueConstraint('run_id', name=op.f('uq_processing_run_id'))
    )
    op.create_table('speed_profile',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('run_id', sa.Integer(), nullable=False),
    sa.Column('n', sa.Integer(), nullable=False),
    sa.Column('time_s', sa.LargeBinary(), nullable=False, comment='float64'),
    sa.Column('speed_rpm', sa.LargeBinary(), nullable=False, comment='float64'),
    sa.ForeignKeyConstraint(['run_id'], ['run.id'], name=op.f('fk_speed_profile_run_id_run'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_speed_profile')),
    sa.UniqueConstraint('run_id', name=op.f('uq_speed_profile_run_id'))
    )
    op.create_table('tach_pulses',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('run_id', sa.Integer(), nullable=False),
    sa.Column('kind', sa.String(length=20), nullable=False, comment='edges or once_per_rev'),
    sa.Column('n', sa.Integer(), nullable=False),
    sa.Column('times', sa.LargeBinary(), nullable=False, comment='float64 LE times in s from the first sample'),
    sa.ForeignKeyConstraint(['run_id'], ['run.id'], name=op.f('fk_tach_pulses_run_id_run'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_tach_pulses')),
    sa.UniqueConstraint('run_id', 'kind', name=op.f('uq_tach_pulses_run_id'))
    )
    with op.batch_alter_table('tach_pulses', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_tach_pulses_run_id'), ['run_id'], unique=False)

    op.create_table('cascade',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('run_id', sa.Integer(), nullable=False),
    sa.Column('channel_id', sa.Integer(), nullable=False),
    sa.Column('n_rows', sa.Integer(), nullable=False),
    sa.Column('n_freq', sa.Integer(), nullable=False),
    sa.Column('speed_rpm', sa.LargeBinary(), nullable=False, comment='float64 (n_rows)'),
    sa.Column('time_s', sa.LargeBinary(), nullable=False, comment='float64 (n_rows)'),
    sa.Column('freq_hz', sa.LargeBinary(), nullable=False, comment='float64 (n_freq)'),
    sa.Column('amplitude', sa.LargeBinary(), nullable=False, comment='float32 (n_rows, n_freq), peak'),
    sa.ForeignKeyConstraint(['channel_id'], ['channel.id'], name=op.f('fk_cascade_channel_id_channel'), ondelete='CASCADE'),
    sa.ForeignKeyConstraint(['run_id'], ['run.id'], name=op.f('fk_cascade_run_id_run'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_cascade')),
    sa.UniqueConstraint('run_id', 'channel_id', name=op.f('uq_cascade_run_id'))
    )
    with op.batch_alter_table('cascade', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_cascade_run_id'), ['run_id'], unique=False)

    op.create_table('vector_track',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('run_id', sa.Integer(), nullable=False),
    sa.Column('channel_id', sa.Integer(), nullable=False),
    sa.Column('order', sa.Float(), nullable=False, comment='1.0 = 1X'),
    sa.Column('compensated', sa.Boolean(), nullable=False, comment='slow-roll vector subtracted'),
    sa.Column('n', sa.Integer(), nullable=False),
    sa.Column('time_s', sa.LargeBinary(), nullable=False, comment='float64, block centre times'),
    sa.Column('speed_rpm', sa.LargeBinary(), nullable=False, comment='float64'),
    sa.Column('amplitude', sa.LargeBinary(), nullable=False, comment='float64, pp (proximity) or pk (seismic)'),
    sa.Column('phase_lag_deg', sa.LargeBinary(), nullable=False, comment='float64, 0 <= lag < 360'),
    sa.Column('direct', sa.LargeBinary(), nullable=False, comment='float64, p-p (displacement) or rms (seismic)'),
    sa.ForeignKeyConstraint(['channel_id'], ['channel.id'], name=op.f('fk_vector_track_channel_id_channel'), ondelete='CASCADE'),
    sa.ForeignKeyConstraint(['run_id'], ['run.id'], name=op.f('fk_vector_track_run_id_run'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_vector_track')),
    sa.UniqueConstraint('run_id', 'channel_id', 'order', 'compensated', name=op.f('uq_vector_track_run_id'))
    )
    with op.batch_alter_table('vector_track', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_vector_track_run_id'), ['run_id'], unique=False)

    op.create_table('waveform_chunk',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('channel_id', sa.Integer(), nullable=False),
    sa.Column('chunk_index', sa.Integer(), nullable=False),
    sa.Column('start_index', sa.Integer(), nullable=False, comment='sample index of the first sample'),
    sa.Column('n_samples', sa.Integer(), nullable=False),
    sa.Column('sample_rate_hz', sa.Float(), nullable=False),
    sa.Column('data', sa.LargeBinary(), nullable=False, comment='float32 little-endian samples'),
    sa.ForeignKeyConstraint(['channel_id'], ['channel.id'], name=op.f('fk_waveform_chunk_channel_id_channel'), ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_waveform_chunk')),
    sa.UniqueConstraint('channel_id', 'chunk_index', name=op.f('uq_waveform_chunk_channel_id'))
    )


def downgrade() -> None:
    op.drop_table('waveform_chunk')
    with op.batch_alter_table('vector_track', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_vector_track_run_id'))

    op.drop_table('vector_track')
    with op.batch_alter_table('cascade', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_cascade_run_id'))

    op.drop_table('cascade')
    with op.batch_alter_table('tach_pulses', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_tach_pulses_run_id'))

    op.drop_table('tach_pulses')
    op.drop_table('speed_profile')
    op.drop_table('processing')
    with op.batch_alter_table('finding', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_finding_run_id'))

    op.drop_table('finding')
    with op.batch_alter_table('channel', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_channel_run_id'))

    op.drop_table('channel')
    with op.batch_alter_table('run', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_run_source_sha256'))
        batch_op.drop_index(batch_op.f('ix_run_machine_id'))

    op.drop_table('run')
    with op.batch_alter_table('probe', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_probe_machine_id'))

    op.drop_table('probe')
    op.drop_table('machine')
