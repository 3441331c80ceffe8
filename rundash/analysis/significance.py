"""Engineering floors of a comparison: how large a change must be to matter.

A change between two runs is flagged only when it is statistically significant
(:func:`rundash.analysis.compare.shift`) *and* at least its floor. Run-to-run scatter of
well-measured data is tiny (sigma 0.1 rpm on a critical speed, 0.03 deg on a lag), so
without a floor every row would be "significant".

Floors (each stated with its source in the comparison's output):

critical speed
    2 % of the earlier run's critical speed (our own floor, common practice, no source);
AF
    25 % of the earlier AF, and at least 0.5 (our own floor, common practice, no source);
phase lag
    20 deg (our own floor, common practice, no source: lags of one machine scatter by
    ten degrees or more between starts);
1X amplitude (at a speed, or at a critical's peak)
    25 % of the zone B/C boundary at that speed: a change of the 1X level of 25 % of the
    B/C boundary is the ISO 10816-1 / ISO 20816-1 "criterion II" (change of vibration
    magnitude), from memory. The B/C boundary is ISO 7919-3's 9000/sqrt(n) um p-p for
    shaft displacement and ISO 10816-3's 4.5 mm/s rms (group 1, rigid support: the
    default) for housing velocity, both from memory.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

SPEED_FLOOR_PCT = 2.0
AF_FLOOR_FRACTION = 0.25
AF_FLOOR_MIN = 0.5
PHASE_FLOOR_DEG = 20.0
AMPLITUDE_FLOOR_OF_BC = 0.25
_OWN = "our own floor, common practice, no source"
_CRITERION_II = ("25 % of the zone B/C boundary: ISO 10816-1 / ISO 20816-1 criterion II, "
                 "from memory")


@dataclass(frozen=True)
class Floor:
    """The smallest change that matters, in the quantity's units, and where it comes from."""

    value: float
    units: str
    source: str


def speed_floor(speed_rpm: float | None) -> Floor | None:
    """Floor of a critical-speed change (rpm)."""
    if speed_rpm is None or not math.isfinite(speed_rpm):
        return None
    return Floor(SPEED_FLOOR_PCT / 100.0 * abs(speed_rpm), "rpm",
                 f"{SPEED_FLOOR_PCT:g} % of the earlier critical speed ({_OWN})")


def af_floor(af: float | None) -> Floor | None:
    """Floor of an AF change (no unit)."""
    if af is None or not math.isfinite(af):
        return None
    return Floor(max(AF_FLOOR_MIN, AF_FLOOR_FRACTION * abs(af)), "",
                 f"{100 * AF_FLOOR_FRACTION:g} % of the earlier AF, at least "
                 f"{AF_FLOOR_MIN:g} ({_OWN})")


def phase_floor() -> Floor:
    """Floor of a phase-lag change (deg)."""
    return Floor(PHASE_FLOOR_DEG, "deg", f"{PHASE_FLOOR_DEG:g} deg ({_OWN})")


def amplitude_floor(kind: str | None, speed_rpm: float | None) -> Floor | None:
    """Floor of a 1X amplitude change at ``speed_rpm``, in the comparison's vector units
    (um p-p for proximity, mm/s peak for velocity); None for other transducers.

    >>> round(amplitude_floor("proximity", 3600.0).value, 2)  # 0.25 x 9000/60 um p-p
    37.5
    >>> round(amplitude_floor("velocity", 3600.0).value, 3)   # 0.25 x 4.5 x sqrt 2 mm/s pk
    1.591
    """
    if kind == "proximity" and speed_rpm is not None and speed_rpm > 0:
        bc = 9000.0 / math.sqrt(speed_rpm)
        return Floor(AMPLITUDE_FLOOR_OF_BC * bc, "um pp",
                     f"{_CRITERION_II}; B/C {bc:.3g} um p-p at {speed_rpm:.0f} rpm "
                     "(ISO 7919-3, 9000/sqrt(n), from memory)")
    if kind == "velocity":
        return Floor(AMPLITUDE_FLOOR_OF_BC * 4.5 * math.sqrt(2.0), "mm/s pk",
                     f"{_CRITERION_II}; B/C 4.5 mm/s rms (ISO 10816-3 group 1, rigid "
                     "support, the default; from memory), as a 1X peak")
    return None
