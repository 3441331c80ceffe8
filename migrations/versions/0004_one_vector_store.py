"""one vector store: the live monitor's vectors move into vector_track

vector_track gains ``source`` ('processed' for what process_run found, 'live' for what the
live monitor found while recording) and ``seq`` (the live batch number; 0 for processed
rows); its unique key takes both. Every live_vector row is copied into vector_track as a
'live', uncompensated row with its batch number, then live_vector is dropped. Downgrade
moves the live rows back. No vector is lost either way.

Revision ID: 0004
Revises: 0003
Create Date: 2026-12-02 03:30:00
"""
from alembic import op
import sqlalchemy as sa

revision = '0004'
down_revision = '0003'
branch_labels = None
depends_on = None

BLOBS = ("n", "time_s", "speed_rpm", "amplitude", "phase_lag_deg", "direct")
COMMENTS = {
    "amplitude": ("float32 (processed) or float64 (live), pp (proximity) or pk (seismic)",
                  "float64, pp (proximity) or pk (seismic)"),
    "phase_lag_deg": ("float32 or float64, 0 <= lag < 360", "float64, 0 <= lag < 360"),
    "direct": ("float32 or float64, p-p (displacement) or rms (seismic)",
               "float64, p-p (displacement) or rms (seismic)"),
}
KEY_OLD = ["run_id", "channel_id", "order", "compensated"]
KEY_NEW = ["run_id", "channel_id", "order", "compensated", "source", "seq"]


def _cols(names):
    return ", ".join(f'"{c}"' for c in names)


def upgrade() -> None:
    with op.batch_alter_table("vector_track", schema=None) as b:
        b.add_column(sa.Column("source", sa.String(length=10), nullable=False,
                               server_default="processed", comment="processed or live"))
        b.add_column(sa.Column("seq", sa.Integer(), nullable=False, server_default="0",
                               comment="live: batch number from 0; processed: 0"))
        b.drop_constraint("uq_vector_track_run_id", type_="unique")
        b.create_unique_constraint("uq_vector_track_run_id", KEY_NEW)
        for col, (new, old) in COMMENTS.items():
            b.alter_column(col, existing_type=sa.LargeBinary(), existing_nullable=False,
                           comment=new, existing_comment=old)
    common = ["run_id", "channel_id", "order", "seq", *BLOBS]
    op.execute(f'INSERT INTO vector_track ({_cols(common)}, "compensated", "source") '
               f"SELECT {_cols(common)}, false, 'live' FROM live_vector ORDER BY id")
    with op.batch_alter_table("live_vector", schema=None) as b:
        b.drop_index(b.f("ix_live_vector_run_id"))
    op.drop_table("live_vector")


def downgrade() -> None:
    op.create_table(
        "live_vector",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("run_id", sa.Integer(), nullable=False),
        sa.Column("channel_id", sa.Integer(), nullable=False),
        sa.Column("order", sa.Float(), nullable=False, comment="1.0 = 1X"),
        sa.Column("seq", sa.Integer(), nullable=False, comment="batch number, from 0"),
        sa.Column("n", sa.Integer(), nullable=False),
        sa.Column("time_s", sa.LargeBinary(), nullable=False, comment="float64, block centre times"),
        sa.Column("speed_rpm", sa.LargeBinary(), nullable=False, comment="float64"),
        sa.Column("amplitude", sa.LargeBinary(), nullable=False,
                  comment="float64, pp (proximity) or pk (seismic)"),
        sa.Column("phase_lag_deg", sa.LargeBinary(), nullable=False,
                  comment="float64, 0 <= lag < 360"),
        sa.Column("direct", sa.LargeBinary(), nullable=False,
                  comment="float64, p-p (displacement) or rms (seismic)"),
        sa.ForeignKeyConstraint(["channel_id"], ["channel.id"],
                                name=op.f("fk_live_vector_channel_id_channel"), ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["run_id"], ["run.id"], name=op.f("fk_live_vector_run_id_run"),
                                ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_live_vector")),
        sa.UniqueConstraint("run_id", "seq", "channel_id", "order",
                            name=op.f("uq_live_vector_run_id")),
    )
    with op.batch_alter_table("live_vector", schema=None) as b:
        b.create_index(b.f("ix_live_vector_run_id"), ["run_id"], unique=False)
    common = ["run_id", "channel_id", "order", "seq", *BLOBS]
    op.execute(f"INSERT INTO live_vector ({_cols(common)}) SELECT {_cols(common)} "
               f"FROM vector_track WHERE source = 'live' ORDER BY id")
    op.execute("DELETE FROM vector_track WHERE source = 'live'")
    with op.batch_alter_table("vector_track", schema=None) as b:
        b.drop_constraint("uq_vector_track_run_id", type_="unique")
        b.create_unique_constraint("uq_vector_track_run_id", KEY_OLD)
        b.drop_column("seq")
        b.drop_column("source")
        for col, (new, old) in COMMENTS.items():
            b.alter_column(col, existing_type=sa.LargeBinary(), existing_nullable=False,
                           comment=old, existing_comment=new)
