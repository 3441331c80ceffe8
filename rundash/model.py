"""Frozen dataclasses passed between layers: machine, probe, tach, run and record info.

Speeds are in rpm (``*_rpm``), angles in degrees (``*_deg``), times in seconds from the
record's first sample, datetimes in UTC. Nothing here knows SQL or files.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime
from typing import Literal

MachineKind = Literal[
    "compressor", "steam_turbine", "gas_turbine", "pump", "fan", "motor", "generator",
    "gearbox", "expander", "other",
]
MACHINE_KINDS: tuple[str, ...] = MachineKind.__args__  # type: ignore[attr-defined]
TransducerKind = Literal["proximity", "velocity", "acceleration"]
TRANSDUCER_KINDS: tuple[str, ...] = TransducerKind.__args__  # type: ignore[attr-defined]
RunKind = Literal["run-up", "coast-down", "mixed", "steady"]
RUN_KINDS: tuple[str, ...] = RunKind.__args__  # type: ignore[attr-defined]
#: what kind of test a run records: a field start-up or coast-down, a shop (mechanical
#: running) test on the test stand, an overspeed trip test; the scope of a profile's
#: rules names these (see rundash.analysis.scope)
TestKind = Literal["field", "shop-test", "trip-test"]
TEST_KINDS: tuple[str, ...] = TestKind.__args__  # type: ignore[attr-defined]


@dataclass(frozen=True)
class MachineSpec:
    """A machine train as the user describes it.

    Speeds in rpm. ``profile`` names a guidance profile shipped with rundash or a path
    to a profile file given by the user (a purchase specification).
    """

    name: str
    kind: str
    rated_speed_rpm: float
    min_operating_speed_rpm: float
    max_continuous_speed_rpm: float
    trip_speed_rpm: float | None = None
    profile: str = "fixed-margin"
    rotation: str = "ccw"
    description: str = ""


@dataclass(frozen=True)
class ProbeSpec:
    """A vibration transducer and the file column that carries it.

    ``units`` is the engineering unit the sensitivity refers to (``um``, ``mil``,
    ``mm/s``, ``in/s``, ``m/s2``, ``g``). ``sensitivity_mv_per_unit`` turns volts into
    that unit; ``None`` means the column already holds engineering units.
    ``angle_deg`` is the mounting angle from the reference sensor in the direction of
    rotation; ``axis`` and ``pair`` describe the X/Y pairing at one bearing.
    """

    name: str
    column: str
    kind: str
    units: str
    sensitivity_mv_per_unit: float | None = None
    angle_deg: float = 0.0
    bearing: str = ""
    axis: str = "none"
    pair: str | None = None


@dataclass(frozen=True)
class TachSpec:
    """The once-per-rev reference channel (see :mod:`rundash.conventions`)."""

    column: str
    pulses_per_rev: int = 1
    edge: str = "rising"
    threshold: float | None = None
    hysteresis: float | None = None
    angle_deg: float = 0.0


@dataclass(frozen=True)
class DataSpec:
    """How a data file maps to channels.

    ``sample_rate_hz`` is needed by formats that do not declare it (CSV without a time
    column); ``time_column`` names the CSV column with time in seconds.
    ``full_scale_v`` scales normalised PCM in WAV files (1.0 full scale -> volts).
    ``signal_units`` is ``"V"`` (columns in volts, scaled by each probe's sensitivity)
    or ``"engineering"`` (columns already in each probe's units).
    ``delimiter`` and ``decimal`` set a CSV's dialect (``"auto"``: sniffed).
    """

    format: str = "auto"
    time_column: str | None = None
    sample_rate_hz: float | None = None
    full_scale_v: float = 1.0
    signal_units: str = "V"
    dataset: str | None = None
    delimiter: str = "auto"
    decimal: str = "auto"


@dataclass(frozen=True)
class ProcessingSpec:
    """Processing choices a machine description may fix (``[processing]``).

    ``slow_roll_rpm`` is the slow-roll speed band (low, high) in rpm; ``None`` lets
    processing choose one from the data. ``tracker`` names the tracker of the vectors
    (``'order'``, ``'vold-kalman'``; ``None``: ``'order'``).
    """

    slow_roll_rpm: tuple[float, float] | None = None
    tracker: str | None = None  # "order" or "vold-kalman"; None: processing's default


@dataclass(frozen=True)
class SiteLevel:
    """Vibration levels the site or the OEM sets for one probe (``[[levels]]``).

    ``measure`` is ``'direct'`` (unfiltered) or ``'1x'``; ``alert`` and ``trip`` are in the
    probe's level convention (um p-p for proximity, mm/s rms for velocity), either may be
    ``None``; ``source`` names the document they come from. The protection system's own
    setpoints are not these: they are levels a crew watches and a verdict applies.
    """

    probe: str
    measure: str
    alert: float | None
    trip: float | None
    source: str


@dataclass(frozen=True)
class ZoneSpec:
    """``[zones]``: which ISO part and class the vibration zones come from (None: the
    default, said in the findings); ``new_machine``: zone A expected. The field types are
    the allowed values: the machine file's ``[zones]`` is checked against them."""

    part: Literal["10816-3", "10816-7", "10816-2"] | None = None
    group: Literal["group1", "group2"] | None = None
    support: Literal["rigid", "flexible"] | None = None
    pump_category: Literal["I", "II"] | None = None
    pump_power: Literal["above-200kW", "up-to-200kW"] | None = None
    new_machine: bool | None = None


@dataclass(frozen=True)
class MachineDescription:
    """Everything a machine description file says."""

    machine: MachineSpec
    tach: TachSpec
    probes: tuple[ProbeSpec, ...]
    data: DataSpec = field(default_factory=DataSpec)
    source: str = ""
    processing: ProcessingSpec = field(default_factory=ProcessingSpec)
    levels: tuple[SiteLevel, ...] = ()
    zones: ZoneSpec = field(default_factory=ZoneSpec)

    def probe(self, name: str) -> ProbeSpec:
        for p in self.probes:
            if p.name == name:
                return p
        raise KeyError(name)


@dataclass(frozen=True)
class ChannelInfo:
    """A stored channel of a run."""

    id: int
    name: str
    role: str  # "tach" or "probe"
    probe_name: str | None
    kind: str | None
    unit: str
    sample_rate_hz: float
    n_samples: int


@dataclass(frozen=True)
class RunInfo:
    """A stored run as the faces see it."""

    id: int
    machine_name: str
    kind: str
    label: str
    cycle: str
    started_at: datetime | None
    state: str
    source_name: str
    source_sha256: str
    notes: str = ""
    n_channels: int = 0
    duration_s: float = 0.0
    processed: bool = False
    verdict: str | None = None
    test_kind: str = "field"


@dataclass(frozen=True)
class MachineInfo:
    """A stored machine with its probes."""

    id: int
    spec: MachineSpec
    probes: tuple[ProbeSpec, ...]
    tach: TachSpec | None
    n_runs: int = 0
