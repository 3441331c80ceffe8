"""Conventions of rundash, stated once. dsp and analysis docstrings point here.

Time
    Seconds from the first sample of the record (t = 0 at sample index 0), float64.

Once-per-rev reference
    The tach channel gives ``pulses_per_rev`` pulses per revolution (N >= 1). A reference
    event is the chosen edge (``rising`` or ``falling``) crossing a threshold with
    hysteresis, located to sub-sample precision by linear interpolation between the two
    samples that straddle the threshold. With N > 1 every N-th event (the one after the
    longest gap when a marker is longer, else the first) is kept as the once-per-rev event.

Shaft angle
    ``theta(t)``, in revolutions, is 0 at the first once-per-rev event and k at the k-th.
    Between events it follows a smooth cubic model of angle against time (a not-a-knot
    cubic spline through theta(t_k) = k, monotone-checked, else PCHIP; see
    :mod:`rundash.dsp.speed` for why angle against time and not the inverse).

nX vector (complex phasor)
    A channel's n-per-rev component is ``x_n(t) = Re(c * exp(1j * 2*pi * n * theta(t)))``
    with ``c = |c| * exp(-1j * phi)``. ``|c|`` is the peak amplitude. ``phi`` is the
    **phase lag** in degrees of the nX cycle, 0 <= phi < 360: the angle from the reference
    event to the next positive peak of the nX-filtered signal. With this convention the lag
    rises by about 180 degrees through a lightly damped critical speed (in phase well
    below, about 90 degrees lag at resonance, about 180 degrees well above).

Probe mounting angle
    Stored phase lags are measured from the reference event as recorded; the probe's
    mounting angle relative to the reference sensor is **not** applied. Functions that
    compare probes at different angles (orbits, mode-shape hints) apply it explicitly and
    say so.

Probe angles and rotation
    ``rotation`` of a machine is ``cw`` or ``ccw`` viewed from the driver end. A probe's
    ``angle_deg`` is in degrees from the once-per-rev (reference) sensor in the direction
    of rotation; the reference sensor's own ``angle_deg`` is in degrees from top dead
    centre in the direction of rotation (0: at the top). The trade's form, degrees left or
    right of top dead centre viewed from the driver end ("45° L"), is accepted in the
    machine description and shown beside the numbers (:func:`angle_from_top`,
    :func:`side_of_top`): viewed from the driver end a ``ccw`` shaft turns from the top
    towards the left, so "L" is the direction of rotation for ``ccw`` and against it for
    ``cw``.

Amplitudes
    Proximity probes: micrometres peak-to-peak (pp = 2 |c|). Velocity: mm/s peak for
    filtered vectors, rms for overall levels. Acceleration: m/s^2 likewise. Direct
    (unfiltered) level per revolution: p-p for displacement, rms for velocity and
    acceleration.
"""

from __future__ import annotations

import numpy as np


def wrap_deg(angle_deg):
    """Wrap angles in degrees into [0, 360)."""
    a = np.mod(angle_deg, 360.0)
    # np.mod can return 360.0 for tiny negative inputs through rounding
    return np.where(a >= 360.0, 0.0, a) if np.ndim(a) else (0.0 if a >= 360.0 else float(a))


def lag_deg_from_phasor(c):
    """Phase lag in degrees, in [0, 360), of complex phasors ``c`` (see module doc)."""
    return wrap_deg(-np.degrees(np.angle(c)))


def phasor_from_lag(amplitude_peak, phase_lag_deg):
    """Complex phasor from a peak amplitude and a phase lag in degrees."""
    return np.asarray(amplitude_peak) * np.exp(-1j * np.radians(phase_lag_deg))


def angle_from_top(deg: float, side: str, rotation: str) -> float:
    """Degrees from top dead centre in the direction of rotation, in [0, 360), of a mounting
    angle ``deg`` to the ``side`` ``'L'`` or ``'R'`` of top dead centre viewed from the
    driver end (see the module doc).

    >>> angle_from_top(45, "L", "ccw"), angle_from_top(45, "L", "cw"), angle_from_top(45, "R", "cw")
    (45.0, 315.0, 45.0)
    """
    along = (side.upper() == "L") == (rotation == "ccw")
    return float(wrap_deg(deg if along else -deg))


def side_of_top(angle_from_top_deg: float, rotation: str) -> str:
    """The trade's form of an angle from top dead centre in the direction of rotation:
    ``'45° L'``, ``'0° (top)'``, ``'180° (bottom)'`` (viewed from the driver end).

    >>> side_of_top(45, "ccw"), side_of_top(315, "ccw"), side_of_top(315, "cw")
    ('45° L', '45° R', '45° L')
    """
    a = float(wrap_deg(round(float(angle_from_top_deg), 6)))
    if a == 0.0:
        return "0° (top)"
    if a == 180.0:
        return "180° (bottom)"
    along = a < 180.0
    deg = a if along else 360.0 - a
    side = "L" if along == (rotation == "ccw") else "R"
    return f"{deg:g}° {side}"
