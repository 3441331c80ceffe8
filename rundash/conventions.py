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
    Angles are in degrees measured from the reference sensor in the direction of rotation.
    ``rotation`` of a machine is ``cw`` or ``ccw`` viewed from the driver end.

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
