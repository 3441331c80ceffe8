"""Typed ORM models: the only description of the schema besides the Alembic revisions.

Every speed is in rpm, every time in seconds from the record's first sample unless the
column's comment says otherwise; datetimes are stored in UTC. Arrays (waveform chunks,
derived vectors) are stored as little-endian blobs (see :mod:`rundash.storage.codec`).
"""

from __future__ import annotations

from datetime import datetime, timezone
from typing import Annotated, Any

from sqlalchemy import (
    JSON, BigInteger, Boolean, DateTime, Float, ForeignKey, Integer, LargeBinary, MetaData,
    String, Text, TypeDecorator, UniqueConstraint,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column, relationship

NAMING_CONVENTION = {
    "ix": "ix_%(column_0_label)s",
    "uq": "uq_%(table_name)s_%(column_0_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}


class UTCDateTime(TypeDecorator):
    """A datetime stored in UTC and always returned timezone-aware (UTC)."""

    impl = DateTime
    cache_ok = True

    def process_bind_param(self, value: datetime | None, dialect) -> datetime | None:
        if value is None:
            return None
        if value.tzinfo is None:
            raise ValueError("naive datetime given; rundash stores UTC-aware datetimes only")
        return value.astimezone(timezone.utc).replace(tzinfo=None)

    def process_result_value(self, value: datetime | None, dialect) -> datetime | None:
        if value is None:
            return None
        return value.replace(tzinfo=timezone.utc)


def utcnow() -> datetime:
    return datetime.now(timezone.utc)


intpk = Annotated[int, mapped_column(Integer, primary_key=True)]
#: Sample counts and indexes: 64-bit everywhere (SQLite's INTEGER already is; PostgreSQL's
#: INTEGER would overflow after 2**31 samples, about 23 h of one channel at 25.6 kHz).
SampleCount = BigInteger().with_variant(Integer(), "sqlite")
name_str = Annotated[str, mapped_column(String(200))]
speed_rpm = Annotated[float, mapped_column(Float)]
blob = Annotated[bytes, mapped_column(LargeBinary)]
created = Annotated[datetime, mapped_column(UTCDateTime, default=utcnow)]
#: The parent row of a child table, deleted with it: many rows per run (``run_ref``), one
#: row per run (``run_one``), a channel, a machine.
run_ref = Annotated[int, mapped_column(ForeignKey("run.id", ondelete="CASCADE"), index=True)]
run_one = Annotated[int, mapped_column(ForeignKey("run.id", ondelete="CASCADE"), unique=True)]
channel_ref = Annotated[int, mapped_column(ForeignKey("channel.id", ondelete="CASCADE"))]
machine_ref = Annotated[int, mapped_column(ForeignKey("machine.id", ondelete="CASCADE"),
                                           index=True)]


class Base(DeclarativeBase):
    metadata = MetaData(naming_convention=NAMING_CONVENTION)
    type_annotation_map = {dict[str, Any]: JSON, list[Any]: JSON}


class RunChild:
    """A table of rows that belong to one run (deleted with it): an id and the run's id,
    its first two columns."""

    id: Mapped[intpk] = mapped_column(sort_order=-2)
    run_id: Mapped[run_ref] = mapped_column(sort_order=-1)


class RunPart:
    """A table of one row per run (deleted with it): an id and the run's id, unique, its
    first two columns."""

    id: Mapped[intpk] = mapped_column(sort_order=-2)
    run_id: Mapped[run_one] = mapped_column(sort_order=-1)


class Machine(Base):
    __tablename__ = "machine"

    id: Mapped[intpk]
    name: Mapped[name_str] = mapped_column(unique=True)
    kind: Mapped[str] = mapped_column(String(40))
    rated_speed_rpm: Mapped[speed_rpm]
    min_operating_speed_rpm: Mapped[speed_rpm]
    max_continuous_speed_rpm: Mapped[speed_rpm]
    trip_speed_rpm: Mapped[float | None] = mapped_column(Float, comment="rpm; NULL: not given")
    profile: Mapped[str] = mapped_column(String(400), comment="guidance profile name or file")
    rotation: Mapped[str] = mapped_column(String(8), comment="cw or ccw viewed from the driver")
    description: Mapped[str] = mapped_column(Text, default="")
    tach_column: Mapped[str] = mapped_column(String(200))
    tach_pulses_per_rev: Mapped[int] = mapped_column(Integer, default=1)
    tach_edge: Mapped[str] = mapped_column(String(10), default="rising")
    tach_threshold: Mapped[float | None] = mapped_column(Float, comment="signal units; NULL: auto")
    tach_hysteresis: Mapped[float | None] = mapped_column(Float, comment="signal units; NULL: auto")
    tach_angle_deg: Mapped[float] = mapped_column(Float, default=0.0)
    created_at: Mapped[created]

    probes: Mapped[list[Probe]] = relationship(
        back_populates="machine", cascade="all, delete-orphan", order_by="Probe.id")
    runs: Mapped[list[Run]] = relationship(back_populates="machine")


class Probe(Base):
    __tablename__ = "probe"
    __table_args__ = (UniqueConstraint("machine_id", "name"),)

    id: Mapped[intpk]
    machine_id: Mapped[machine_ref]
    name: Mapped[name_str]
    column_name: Mapped[str] = mapped_column(String(200), comment="file column or channel")
    kind: Mapped[str] = mapped_column(String(20), comment="proximity, velocity, acceleration")
    units: Mapped[str] = mapped_column(String(10), comment="unit the sensitivity refers to")
    sensitivity_mv_per_unit: Mapped[float | None] = mapped_column(
        Float, comment="mV per unit; NULL: file holds engineering units")
    angle_deg: Mapped[float] = mapped_column(Float, default=0.0)
    bearing: Mapped[str] = mapped_column(String(100), default="")
    axis: Mapped[str] = mapped_column(String(8), default="none")
    pair_name: Mapped[str | None] = mapped_column(String(200))

    machine: Mapped[Machine] = relationship(back_populates="probes")


class Run(Base):
    __tablename__ = "run"

    id: Mapped[intpk]
    machine_id: Mapped[machine_ref]
    started_at: Mapped[datetime | None] = mapped_column(UTCDateTime, comment="UTC")
    kind: Mapped[str] = mapped_column(String(20), comment="run-up, coast-down, mixed, steady")
    test_kind: Mapped[str] = mapped_column(String(20), default="field", server_default="field",
                                           comment="field, shop-test, trip-test")
    label: Mapped[str] = mapped_column(String(200), default="")
    cycle: Mapped[str] = mapped_column(String(200), default="", comment="overhaul-cycle tag")
    notes: Mapped[str] = mapped_column(Text, default="")
    source_name: Mapped[str] = mapped_column(String(400))
    source_sha256: Mapped[str] = mapped_column(String(64), index=True)
    state: Mapped[str] = mapped_column(String(20), comment="importing, complete, incomplete")
    sample_rate_hz: Mapped[float] = mapped_column(Float)
    n_samples: Mapped[int] = mapped_column(SampleCount, default=0)
    description_toml: Mapped[str] = mapped_column(Text, default="",
                                                  comment="machine file text used at import")
    warnings: Mapped[list[Any]] = mapped_column(JSON, default=list)
    imported_at: Mapped[created]

    machine: Mapped[Machine] = relationship(back_populates="runs")
    channels: Mapped[list[Channel]] = relationship(
        back_populates="run", cascade="all, delete-orphan", passive_deletes=True,
        order_by="Channel.position")


class Channel(RunChild, Base):
    __tablename__ = "channel"
    __table_args__ = (UniqueConstraint("run_id", "name"),)

    position: Mapped[int] = mapped_column(Integer)
    name: Mapped[name_str] = mapped_column(comment="file column or channel name")
    role: Mapped[str] = mapped_column(String(10), comment="tach or probe")
    probe_name: Mapped[str | None] = mapped_column(String(200))
    kind: Mapped[str | None] = mapped_column(String(20), comment="transducer kind; NULL for tach")
    unit: Mapped[str] = mapped_column(String(10), comment="unit of the stored samples")
    scale: Mapped[float] = mapped_column(Float, comment="factor applied to file values")
    sample_rate_hz: Mapped[float] = mapped_column(Float)
    n_samples: Mapped[int] = mapped_column(SampleCount, default=0)

    run: Mapped[Run] = relationship(back_populates="channels")


class WaveformChunk(Base):
    __tablename__ = "waveform_chunk"
    __table_args__ = (
        UniqueConstraint("channel_id", "chunk_index"),
    )

    id: Mapped[intpk]
    channel_id: Mapped[channel_ref]
    chunk_index: Mapped[int] = mapped_column(Integer)
    start_index: Mapped[int] = mapped_column(SampleCount,
                                             comment="sample index of the first sample")
    n_samples: Mapped[int] = mapped_column(SampleCount)
    sample_rate_hz: Mapped[float] = mapped_column(Float)
    data: Mapped[blob] = mapped_column(comment="float32 little-endian samples")


class TachPulses(RunChild, Base):
    __tablename__ = "tach_pulses"
    __table_args__ = (UniqueConstraint("run_id", "kind"),)

    kind: Mapped[str] = mapped_column(String(20), comment="edges or once_per_rev")
    n: Mapped[int] = mapped_column(Integer)
    times: Mapped[blob] = mapped_column(comment="float64 LE times in s from the first sample")


class Processing(RunPart, Base):
    __tablename__ = "processing"

    created_at: Mapped[created]
    rundash_version: Mapped[str] = mapped_column(String(40))
    params: Mapped[dict[str, Any]] = mapped_column(JSON)
    slow_roll_lo_rpm: Mapped[float | None] = mapped_column(Float, comment="NULL: not applied")
    slow_roll_hi_rpm: Mapped[float | None] = mapped_column(Float, comment="NULL: not applied")
    tach_report: Mapped[dict[str, Any]] = mapped_column(JSON)
    segments: Mapped[list[Any]] = mapped_column(JSON)
    warnings: Mapped[list[Any]] = mapped_column(JSON, default=list)
    findings_json: Mapped[dict[str, Any] | None] = mapped_column(
        JSON, comment="the run's findings and verdicts as the JSON output gives them")


class SpeedProfileRow(RunPart, Base):
    __tablename__ = "speed_profile"

    n: Mapped[int] = mapped_column(Integer)
    time_s: Mapped[blob] = mapped_column(comment="float64")
    speed_rpm: Mapped[blob] = mapped_column(comment="float64")


class BlockAxes(RunPart, Base):
    """The block centre times and mean speeds every processed vector track of a run
    shares, stored once for the run (a processed track's own ``time_s`` and
    ``speed_rpm`` are empty; tracks written before revision 0007 carry theirs)."""

    __tablename__ = "block_axes"

    n: Mapped[int] = mapped_column(Integer)
    time_s: Mapped[blob] = mapped_column(comment="float64, block centre times")
    speed_rpm: Mapped[blob] = mapped_column(comment="float64, block mean speeds")


class VectorTrack(RunChild, Base):
    """The nX vectors of a run per channel and order: one store for both sources.

    ``source`` 'processed': what ``process_run`` found (one row per channel, order and
    compensation, ``seq`` 0; replaced on re-processing). ``source`` 'live': what the live
    monitor found while the run was recorded, appended batch by batch (``seq`` the batch
    number, never compensated; kept when the run is processed).

    A processed track's ``time_s`` and ``speed_rpm`` are empty since revision 0007: the
    tracks of a run share one time and speed axis, stored once in ``block_axes``."""

    __tablename__ = "vector_track"
    __table_args__ = (UniqueConstraint("run_id", "channel_id", "order", "compensated",
                                       "source", "seq"),)

    channel_id: Mapped[channel_ref]
    order: Mapped[float] = mapped_column(Float, comment="1.0 = 1X")
    compensated: Mapped[bool] = mapped_column(Boolean, comment="slow-roll vector subtracted")
    source: Mapped[str] = mapped_column(String(10), default="processed",
                                        server_default="processed",
                                        comment="processed or live")
    seq: Mapped[int] = mapped_column(Integer, default=0, server_default="0",
                                     comment="live: batch number from 0; processed: 0")
    n: Mapped[int] = mapped_column(Integer)
    time_s: Mapped[blob] = mapped_column(comment="float64, block centre times")
    speed_rpm: Mapped[blob] = mapped_column(comment="float64")
    amplitude: Mapped[blob] = mapped_column(
        comment="float32 (processed) or float64 (live), pp (proximity) or pk (seismic)")
    phase_lag_deg: Mapped[blob] = mapped_column(comment="float32 or float64, 0 <= lag < 360")
    direct: Mapped[blob] = mapped_column(
        comment="float32 or float64, p-p (displacement) or rms (seismic)")


class CascadeRow(RunChild, Base):
    __tablename__ = "cascade"
    __table_args__ = (UniqueConstraint("run_id", "channel_id"),)

    channel_id: Mapped[channel_ref]
    n_rows: Mapped[int] = mapped_column(Integer)
    n_freq: Mapped[int] = mapped_column(Integer)
    speed_rpm: Mapped[blob] = mapped_column(comment="float64 (n_rows)")
    time_s: Mapped[blob] = mapped_column(comment="float64 (n_rows)")
    freq_hz: Mapped[blob] = mapped_column(comment="float64 (n_freq)")
    amplitude: Mapped[blob] = mapped_column(comment="float32 (n_rows, n_freq), peak")


class Finding(RunChild, Base):
    __tablename__ = "finding"

    probe_name: Mapped[str] = mapped_column(String(200))
    direction: Mapped[str] = mapped_column(String(20))
    speed_rpm: Mapped[speed_rpm]
    peak_amplitude: Mapped[float | None] = mapped_column(Float)
    amplitude_units: Mapped[str] = mapped_column(String(20))
    af_half_power: Mapped[float | None] = mapped_column(Float, comment="NULL: not determinable")
    af_phase: Mapped[float | None] = mapped_column(Float)
    af_fit: Mapped[float | None] = mapped_column(Float)
    damping_ratio_fit: Mapped[float | None] = mapped_column(Float)
    classification: Mapped[str] = mapped_column(String(40))
    confidence: Mapped[str] = mapped_column(String(20))
    mode_hint: Mapped[str | None] = mapped_column(String(200))
    separation_margin_pct: Mapped[float | None] = mapped_column(Float)
    required_margin_pct: Mapped[float | None] = mapped_column(Float)
    margin_verdict: Mapped[str] = mapped_column(String(20))
    details: Mapped[dict[str, Any]] = mapped_column(JSON)




# ----------------------------------------------------------------------------- live monitor
class LiveStatus(RunPart, Base):
    """The recorder's latest state of a run being recorded (one row per run)."""

    __tablename__ = "live_status"

    state: Mapped[str] = mapped_column(String(20), comment="recording, ended or failed")
    updated_at: Mapped[datetime] = mapped_column(UTCDateTime, comment="UTC, the heartbeat")
    time_s: Mapped[float] = mapped_column(Float, comment="record time of the last sample")
    n_samples: Mapped[int] = mapped_column(SampleCount, comment="samples received per channel")
    speed_rpm: Mapped[float | None] = mapped_column(Float, comment="NULL: no speed yet")
    accel_rpm_s: Mapped[float | None] = mapped_column(Float, comment="rpm/s; NULL: unknown")
    tach_ok: Mapped[bool] = mapped_column(Boolean)
    n_revs: Mapped[int] = mapped_column(Integer)
    message: Mapped[str] = mapped_column(Text, default="")


class LiveEvent(RunChild, Base):
    """The event log of a recorded run: warnings raised and cleared while it ran."""

    __tablename__ = "live_event"

    time_s: Mapped[float] = mapped_column(Float, comment="record time of the event")
    speed_rpm: Mapped[float | None] = mapped_column(Float)
    kind: Mapped[str] = mapped_column(String(40))
    severity: Mapped[str] = mapped_column(String(20), comment="info, warning or alarm")
    message: Mapped[str] = mapped_column(Text)
    details: Mapped[dict[str, Any]] = mapped_column(JSON)
    created_at: Mapped[created]


# ----------------------------------------------------------------------------- review
#: a review row's identity, the same in every database (sync adds rows by it)
review_uid = Annotated[str, mapped_column(String(32), unique=True,
                                          comment="identity across databases (sync)")]

class ReviewDecision(Base):
    """One entry of the engineer's review of a run: appended, never edited.

    ``action`` is ``accept``, ``reject`` (with ``reason``), ``correct`` (the engineer's
    ``speed_rpm`` and ``af``), ``add`` (a critical the automation missed), ``annotate``
    (free ``text`` on a ``plot`` at ``speed_rpm``) or ``withdraw`` (takes back the entry
    ``target_uid``). A later decision on the same critical supersedes an earlier one.
    """

    __tablename__ = "review_decision"

    id: Mapped[intpk]
    uid: Mapped[review_uid]
    run_id: Mapped[run_ref]
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, comment="UTC, when decided")
    reviewer: Mapped[str] = mapped_column(String(200), comment="who decided (as typed)")
    action: Mapped[str] = mapped_column(String(20))
    probe_name: Mapped[str] = mapped_column(String(200), default="")
    direction: Mapped[str] = mapped_column(String(20), default="")
    target_speed_rpm: Mapped[float | None] = mapped_column(
        Float, comment="rpm of the automatic critical decided on; NULL: none")
    target_uid: Mapped[str | None] = mapped_column(String(32), comment="entry withdrawn")
    speed_rpm: Mapped[float | None] = mapped_column(Float, comment="engineer's speed, rpm")
    af: Mapped[float | None] = mapped_column(Float, comment="engineer's AF")
    reason: Mapped[str] = mapped_column(String(40), default="", comment="reject reason")
    plot: Mapped[str] = mapped_column(String(20), default="", comment="annotated plot")
    text: Mapped[str] = mapped_column(Text, default="")
    processing_at: Mapped[datetime | None] = mapped_column(
        UTCDateTime, comment="the processing (its time) the entry refers to; NULL: none")
    changed: Mapped[dict[str, Any]] = mapped_column(JSON, comment="what the entry changed")


class SignOff(Base):
    """A reviewer's sign-off of a run: appended, never edited (a later one supersedes)."""

    __tablename__ = "sign_off"

    id: Mapped[intpk]
    uid: Mapped[review_uid]
    run_id: Mapped[run_ref]
    created_at: Mapped[datetime] = mapped_column(UTCDateTime, comment="UTC, when recorded")
    name: Mapped[str] = mapped_column(String(200))
    role: Mapped[str] = mapped_column(String(200), default="")
    decision: Mapped[str] = mapped_column(
        String(40), comment="accepted, accepted with remarks, not accepted")
    remarks: Mapped[str] = mapped_column(Text, default="")
    signed_on: Mapped[str] = mapped_column(String(10), comment="date given, YYYY-MM-DD")
    processing_at: Mapped[datetime | None] = mapped_column(
        UTCDateTime, comment="the processing (its time) signed; NULL: none")
    snapshot: Mapped[dict[str, Any]] = mapped_column(
        JSON, comment="the reviewed verdict and criticals as signed")
