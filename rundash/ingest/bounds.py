"""Physical ranges of the numbers a machine description, a data file or a live stream may
carry, and the one check that applies them.

A value outside its range is not a measurement of a rotating machine (a sample period
written where the rate belongs, 1e12 Hz, 1e20 pulses per revolution): it is refused with
one line naming where it came from, the value and the range, before anything is stored.
The ranges are wide on purpose — they catch mistakes, not unusual machines — and the
README states them ("Ranges of the numbers"). Where a range comes from is said beside it;
all are common practice, no source.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from rundash.errors import plain


@dataclass(frozen=True)
class Range:
    """A closed interval ``lo <= value <= hi`` in ``unit``, and what it is for."""

    lo: float
    hi: float
    unit: str
    what: str

    def text(self) -> str:
        """``10 to 1e+07 Hz`` as the messages and the README say it."""
        unit = f" {self.unit}" if self.unit else ""
        return f"{plain_number(self.lo)} to {plain_number(self.hi)}{unit}"

    def contains(self, value: float) -> bool:
        return isinstance(value, (int, float)) and not isinstance(value, bool) and \
            math.isfinite(value) and self.lo <= value <= self.hi


def plain_number(x: float) -> str:
    return str(int(x)) if float(x).is_integer() and abs(x) < 1e7 else f"{x:g}"


# Data acquisition for machinery vibration runs from about 100 Hz (slow trend-quality
# waveforms) to a few hundred kHz (dynamic signal analysers); 10 Hz-10 MHz catches a
# sample period (3.9e-5) or a rate in the wrong unit without refusing a real recorder.
SAMPLE_RATE_HZ = Range(10.0, 1e7, "Hz", "a sample rate")
# From slow hydro and wind-turbine main shafts (a few rpm) to small turbochargers and
# high-speed spindles (a few 100 000 rpm).
SPEED_RPM = Range(1.0, 500_000.0, "rpm", "a shaft speed")
# A once-per-rev notch or key (1) up to a fine encoder wheel (4096 lines).
PULSES_PER_REV = Range(1, 4096, "", "pulses per revolution")
# Transducer sensitivities: proximity 7.874 mV/um (200 mV/mil), velocity 4 mV/(mm/s),
# accelerometers 10-10 000 mV/g; 0.001-100 000 mV per unit leaves room for any unit the
# machine description allows (um, mil, mm, mm/s, in/s, m/s2, g).
SENSITIVITY_MV_PER_UNIT = Range(0.001, 100_000.0, "mV per unit", "a sensitivity")
# Tach trigger level and hysteresis, in the file's units (volts or engineering units).
LEVEL = Range(-1e6, 1e6, "", "a trigger level")
HYSTERESIS = Range(1e-9, 1e6, "", "a hysteresis")
# Mounting and reference angles: one turn either way.
ANGLE_DEG = Range(-360.0, 360.0, "deg", "an angle")
# Recorder input ranges: millivolt to kilovolt full scale.
FULL_SCALE_V = Range(1e-3, 1000.0, "V", "a full-scale voltage")
# Channels in one record or stream.
CHANNELS = Range(1, 1024, "", "a channel count")

ALL = {"sample_rate_hz": SAMPLE_RATE_HZ, "speed_rpm": SPEED_RPM,
       "pulses_per_rev": PULSES_PER_REV, "sensitivity_mv_per_unit": SENSITIVITY_MV_PER_UNIT,
       "threshold": LEVEL, "hysteresis": HYSTERESIS, "angle_deg": ANGLE_DEG,
       "full_scale_v": FULL_SCALE_V, "channels": CHANNELS}


def out_of_range(value: float, rng: Range) -> str | None:
    """None when ``value`` lies in ``rng``, else the words of the refusal
    ("expected a sample rate from 10 to 1e+07 Hz, got 3.9e-05").

    >>> out_of_range(25600.0, SAMPLE_RATE_HZ) is None
    True
    >>> out_of_range(3.9e-5, SAMPLE_RATE_HZ)
    'expected a sample rate from 10 to 1e+07 Hz, got 3.9e-05'
    """
    if rng.contains(value):
        return None
    return f"expected {rng.what} from {rng.text()}, got {plain(value)}"
