"""X/Y probe pairs as a pair: 1X orbits, forward and backward whirl, mode directions.

Two probes of one bearing at mounting angles ``a_x`` and ``a_y`` (degrees from the
reference sensor in the direction of rotation, :mod:`rundash.conventions`) read the shaft
displacement ``d = (dx, dy)`` in the plane of the bearing, ``s = dx cos a + dy sin a``.
With 1X phasors ``c = |c| exp(-i lag)`` (``x = Re(c exp(i Theta))``) the two readings give
the phasors ``Dx, Dy`` of the displacement along the axes of the reference sensor (0 deg)
and 90 deg in the direction of rotation by solving

.. math::

    c_x = D_x \\cos a_x + D_y \\sin a_x, \\qquad c_y = D_x \\cos a_y + D_y \\sin a_y .

As a complex number ``z = dx + i dy`` the 1X orbit is ``z = F e^{i\\Theta} + G e^{-i\\Theta}``
with the forward (in the direction of rotation) and backward circular components

.. math::

    F = (D_x + i D_y) / 2, \\qquad G = (\\overline{D_x} + i \\overline{D_y}) / 2 .

The orbit is an ellipse with semi-major axis ``|F| + |G|`` and semi-minor axis
``||F| - |G||`` along the angle ``(arg F + arg G) / 2``; it whirls forward when
``|F| > |G|``. A virtual probe at 0 deg sees the forward part as the phasor ``F`` and the
backward part as ``conj(G)``, so both can be tracked against speed like any 1X vector
(their lag rises through a forward, resp. backward, critical). A planar mode (a support
mode along a principal stiffness axis at ``alpha``) has ``|F| = |G|`` and its major axis at
``alpha``: the direction of a split critical.

API 684 reads the amplification factor on the response of the probes; for orbits the
major-axis response is the one used for margin checks (API RP 684, 2nd ed., 2005, from
memory). The orbit decomposition is the standard full-spectrum/orbit algebra, e.g.
A. Muszynska, "Rotordynamics", CRC Press, 2005, ch. 2 (forward and backward components
of an elliptical orbit).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from rundash.analysis.amplification import half_power
from rundash.analysis.transient import TransientFit
from rundash.dsp.peaks import peaks_with_prominence
from rundash.errors import AnalysisError, invalid_value

__all__ = ["Orbit", "orbit", "ModeDirection", "mode_direction", "MajorAxisReading",
           "major_axis_readings"]

#: Two mode directions closer than this (deg) are not "different directions".
SAME_DIRECTION_DEG = 30.0


@dataclass(frozen=True)
class Orbit:
    """1X orbit components of an X/Y pair (arrays of the shape of the input).

    ``forward`` and ``backward`` are the phasors a virtual probe at 0 deg sees from the
    forward and backward circular parts (|c| units); ``major`` and ``minor`` the semi-axes
    (|c| units: multiply by 2 for p-p), ``major_angle_deg`` the direction of the major
    axis in [0, 180) from the reference sensor in the direction of rotation,
    ``forward_whirl`` True where ``|F| >= |G|``.
    """

    forward: np.ndarray
    backward: np.ndarray
    major: np.ndarray
    minor: np.ndarray
    major_angle_deg: np.ndarray
    forward_whirl: np.ndarray

    def major_vector(self) -> np.ndarray:
        """The major semi-axis as a phasor for :func:`find_criticals`: its magnitude, with
        the phase of the dominant circular component (the forward one where it whirls
        forward)."""
        ph = np.where(self.forward_whirl, np.angle(self.forward), np.angle(self.backward))
        return self.major * np.exp(1j * ph)


def _axes(cx, cy, angle_x_deg: float, angle_y_deg: float):
    ax, ay = math.radians(angle_x_deg), math.radians(angle_y_deg)
    det = math.sin(ay - ax)
    if abs(det) < math.sin(math.radians(20.0)):
        raise AnalysisError(invalid_value(
            "angle_y_deg", angle_y_deg,
            f"a probe angle at least 20 deg from the partner's {angle_x_deg:g} deg (mod 180)"))
    cx = np.asarray(cx, dtype=complex)
    cy = np.asarray(cy, dtype=complex)
    dx = (cx * math.sin(ay) - cy * math.sin(ax)) / det
    dy = (cy * math.cos(ax) - cx * math.cos(ay)) / det
    return dx, dy


def orbit(cx, cy, *, angle_x_deg: float, angle_y_deg: float) -> Orbit:
    """Forward/backward components and ellipse axes of the 1X orbit of an X/Y pair.

    Parameters
    ----------
    cx, cy : array_like of complex
        1X phasors of the two probes (:mod:`rundash.conventions`), same shape.
    angle_x_deg, angle_y_deg : float
        Mounting angles (degrees from the reference sensor in the direction of rotation);
        they must differ by at least 20 deg (mod 180).

    Returns
    -------
    Orbit

    Examples
    --------
    A forward circular orbit of radius 1 seen by probes at 45 and 135 deg:

    >>> import numpy as np
    >>> F = 1.0 * np.exp(-0.3j)
    >>> cx, cy = F * np.exp(-1j * np.radians(45)), F * np.exp(-1j * np.radians(135))
    >>> o = orbit(cx, cy, angle_x_deg=45, angle_y_deg=135)
    >>> round(float(o.major), 6), round(float(o.minor), 6), bool(o.forward_whirl)
    (1.0, 1.0, True)
    """
    dx, dy = _axes(cx, cy, angle_x_deg, angle_y_deg)
    F = 0.5 * (dx + 1j * dy)
    G = 0.5 * (np.conj(dx) + 1j * np.conj(dy))
    aF, aG = np.abs(F), np.abs(G)
    ang = np.degrees(0.5 * (np.angle(F) + np.angle(G))) % 180.0
    return Orbit(F, np.conj(G), aF + aG, np.abs(aF - aG), ang, aF >= aG)


@dataclass(frozen=True)
class ModeDirection:
    """The orbit of one fitted mode at one bearing (from its participations).

    ``direction_deg`` is the major-axis angle in [0, 180) from the reference sensor in
    the direction of rotation; ``ellipticity`` minor/major (0: a line, a planar mode; 1: a
    circle); ``whirl`` ``'forward'``, ``'backward'`` or ``'planar'`` (ellipticity < 0.2);
    ``amplitude`` the major semi-axis of the mode's participation (|c| units).
    """

    direction_deg: float
    ellipticity: float
    whirl: str
    amplitude: float


def mode_direction(rx: complex, ry: complex, *, angle_x_deg: float,
                   angle_y_deg: float) -> ModeDirection:
    """Direction and whirl of a mode at a bearing from its complex participations.

    Examples
    --------
    A planar mode along the 0 deg axis seen by probes at 45 and 135 deg:

    >>> import math
    >>> R = 2.0 * complex(math.cos(1.0), -math.sin(1.0))
    >>> md = mode_direction(R * math.cos(math.radians(45)), R * math.cos(math.radians(135)),
    ...                     angle_x_deg=45, angle_y_deg=135)
    >>> round(md.direction_deg) % 180, md.whirl
    (0, 'planar')
    """
    o = orbit(complex(rx), complex(ry), angle_x_deg=angle_x_deg, angle_y_deg=angle_y_deg)
    maj, mi = float(o.major), float(o.minor)
    ell = mi / maj if maj > 0 else 0.0
    whirl = "planar" if ell < 0.2 else ("forward" if bool(o.forward_whirl) else "backward")
    return ModeDirection(float(o.major_angle_deg), ell, whirl, maj)


def directions_differ(a_deg: float, b_deg: float, tol_deg: float = SAME_DIRECTION_DEG) -> bool:
    """Whether two axis directions (mod 180) differ by more than ``tol_deg``."""
    d = abs((a_deg - b_deg + 90.0) % 180.0 - 90.0)
    return d > tol_deg


@dataclass(frozen=True)
class MajorAxisReading:
    """A peak of the major-axis steady response of a fitted model at one bearing.

    ``speed_rpm`` and ``major`` (|c| units, semi-axis) of the peak; ``af`` its half-power
    AF on that curve inside the band (None when not determinable: ``af_note``);
    ``mode`` the nearest fitted mode.
    """

    speed_rpm: float
    major: float
    af: float | None
    af_note: str
    mode: int


def major_axis_readings(fit: TransientFit, probe_x: int, probe_y: int, *, angle_x_deg: float,
                        angle_y_deg: float, band_rpm=None, n_grid: int = 4001) -> list[MajorAxisReading]:
    """Peaks and half-power AFs of the major-axis steady response of a fitted model.

    The steady response of the model at the two probes (:meth:`TransientFit.steady`) is
    turned into the orbit's major semi-axis against speed; its peaks (prominence at least
    5 % of their height, height at least 5 % of the top) are the sweep-free criticals of
    the bearing read the way API 684 reads the major-axis response, and their AF is the
    half-power AF of that curve (never extrapolated beyond ``band_rpm``, default the
    fitted band).
    """
    band = band_rpm or fit.band_rpm
    grid = np.linspace(band[0], band[1], n_grid)
    H = fit.steady(grid)
    o = orbit(H[probe_x], H[probe_y], angle_x_deg=angle_x_deg, angle_y_deg=angle_y_deg)
    a = o.major
    top = float(a.max())
    pk = np.array([m.peak_speed_rpm or m.fn_rpm for m in fit.modes]) if fit.modes else np.zeros(0)
    out = []
    for i, prom in zip(*peaks_with_prominence(a)):
        if prom < 0.05 * a[i] or a[i] < 0.05 * top:
            continue
        hp = half_power(grid, a, peak_index=int(i))
        k = int(np.argmin(np.abs(pk - hp.nc_rpm))) if pk.size else -1
        out.append(MajorAxisReading(float(hp.nc_rpm), float(hp.peak_amplitude), hp.af, hp.reason, k))
    return out


def pair_shape_hint(rx_a: complex, ry_a: complex, rx_b: complex, ry_b: complex, *,
                    angles_a_deg: tuple[float, float], angles_b_deg: tuple[float, float]):
    """Mode-shape hint of one fitted mode from its participations at two X/Y pairs.

    The mode's orbit at each bearing is split into forward and backward circular parts;
    the phase of the dominant part (the same at both bearings: forward unless the mode
    whirls backward at bearing a) is compared between the bearings with
    :func:`rundash.analysis.modes.mode_hint` (in phase: cylindrical/translational;
    opposed: conical/pivotal). Comparing circular components needs no assumption on the
    probe orientations, unlike comparing two single probes.

    Returns
    -------
    rundash.analysis.modes.ModeHint
    """
    from rundash.analysis.modes import mode_hint

    oa = orbit(complex(rx_a), complex(ry_a), angle_x_deg=angles_a_deg[0], angle_y_deg=angles_a_deg[1])
    ob = orbit(complex(rx_b), complex(ry_b), angle_x_deg=angles_b_deg[0], angle_y_deg=angles_b_deg[1])
    if bool(oa.forward_whirl):
        pa, pb, part = complex(oa.forward), complex(ob.forward), "forward"
    else:
        pa, pb, part = complex(oa.backward), complex(ob.backward), "backward"
    h = mode_hint(float(np.degrees(-np.angle(pa)) % 360.0), float(np.degrees(-np.angle(pb)) % 360.0),
                  amplitude_a=float(oa.major), amplitude_b=float(ob.major))
    ev = (f"mode shape from the fitted participations: {part} circular parts of the mode's "
          f"orbit at the two bearings compared",) + tuple(
        e for e in h.evidence if not e.startswith("probes of the same orientation"))
    return type(h)(h.shape, h.phase_difference_deg, ev, h.caution)
