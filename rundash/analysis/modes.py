"""Mode-shape hints from the 1X phase at the two bearings of a rotor.

At a critical, probes of the same orientation at both bearings that read the same lag
suggest a cylindrical (translational) mode; lags about 180 deg apart suggest a conical
(pivotal) mode. Two probes do not make a mode shape: this is a hint and says so (common
practice, no source).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from rundash.conventions import wrap_deg
from rundash.errors import AnalysisError, invalid_value

HINT_CAUTION = ("a hint from the phase at two probes, not a measured mode shape: confirm "
                "with a rotor model or more measurement stations")


@dataclass(frozen=True)
class ModeHint:
    """``shape`` is ``'cylindrical (translational)'``, ``'conical (pivotal)'`` or
    ``'unclear'``; ``phase_difference_deg`` is lag b minus lag a in (-180, 180]."""

    shape: str
    phase_difference_deg: float | None
    evidence: tuple[str, ...]
    caution: str = HINT_CAUTION


def mode_hint(lag_bearing_a_deg: float, lag_bearing_b_deg: float, *, angle_a_deg: float = 0.0,
              angle_b_deg: float = 0.0, amplitude_a: float | None = None,
              amplitude_b: float | None = None, tolerance_deg: float = 45.0,
              same_orientation_deg: float = 10.0, node_ratio: float = 0.1) -> ModeHint:
    """Hint at the mode shape of a critical from the 1X lags at two bearings.

    Parameters
    ----------
    lag_bearing_a_deg, lag_bearing_b_deg : float
        1X phase lag at the critical (degrees, :mod:`rundash.conventions`) of probes at
        bearing a and bearing b.
    angle_a_deg, angle_b_deg : float
        Mounting angles of the two probes (degrees from the reference sensor in the
        direction of rotation). Compare probes of the same orientation; if they differ by
        more than ``same_orientation_deg`` the angles are applied (lag minus angle), which
        assumes a forward circular orbit, and the hint says so.
    amplitude_a, amplitude_b : float, optional
        1X amplitudes at the critical; if one is below ``node_ratio`` of the other, that
        probe sits near a node and its phase says little.
    tolerance_deg : float
        In phase within this; 180 deg apart within this.

    Returns
    -------
    ModeHint
    """
    for name, val in (("lag_bearing_a_deg", lag_bearing_a_deg), ("lag_bearing_b_deg", lag_bearing_b_deg)):
        if val is None or not math.isfinite(val):
            raise AnalysisError(invalid_value(name, val, "a finite phase lag in degrees"))
    if not 0 < tolerance_deg < 90:
        raise AnalysisError(invalid_value("tolerance_deg", tolerance_deg, "an angle between 0 and 90 deg"))
    evidence = []
    a, b = float(lag_bearing_a_deg), float(lag_bearing_b_deg)
    d_orient = abs((angle_b_deg - angle_a_deg + 180.0) % 360.0 - 180.0)
    if d_orient > same_orientation_deg:
        a, b = a - angle_a_deg, b - angle_b_deg
        evidence.append(f"probe orientations differ by {d_orient:.0f} deg: mounting angles applied, "
                        f"assuming a forward circular orbit")
    else:
        evidence.append("probes of the same orientation compared")
    diff = float(wrap_deg(b - a + 180.0)) - 180.0
    if diff == -180.0:
        diff = 180.0
    evidence.append(f"lag at bearing b minus bearing a: {diff:+.0f} deg")
    if amplitude_a is not None and amplitude_b is not None:
        lo, hi = sorted((abs(amplitude_a), abs(amplitude_b)))
        if hi > 0 and lo < node_ratio * hi:
            evidence.append(f"one bearing reads {100 * lo / hi:.0f} % of the other: it may sit near "
                            f"a node, so its phase says little")
            return ModeHint("unclear", diff, tuple(evidence))
    if abs(diff) <= tolerance_deg:
        shape = "cylindrical (translational)"
        evidence.append("both ends move in phase")
    elif abs(diff) >= 180.0 - tolerance_deg:
        shape = "conical (pivotal)"
        evidence.append("the ends move in opposition")
    else:
        shape = "unclear"
        evidence.append(f"neither in phase nor opposed within {tolerance_deg:g} deg")
    return ModeHint(shape, diff, tuple(evidence))
