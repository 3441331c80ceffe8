"""Synthetic live-monitor runs with known answers, written as WAV by scipy.

The probe signal is the quasi-steady response of a single-degree-of-freedom rotor to
unbalance, x = Re(H(w) exp(j 2 pi theta)), H = e w^2 / (wn^2 - w^2 + 2 j zeta wn w)
(textbook closed form, e.g. Rao, Mechanical Vibrations, 5th ed., section 3.7); with
zeta = 0.05 its half-power band runs from about (1 - zeta) to (1 + zeta) x the natural
frequency. The speed follows a piecewise-linear rpm(t) of our own choosing; the tach is
the trapezoid pulse of :func:`tests.synth.tach_waveform`.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from scipy.io import wavfile

from tests import synth

SENS_V_PER_UM = 7.874e-3

MACHINE = """
[machine]
name = "Live rig L-1"
kind = "compressor"
rated_speed_rpm = 5200
min_operating_speed_rpm = 4800
max_continuous_speed_rpm = 5460
profile = "api617"

[tach]
column = "ch1"

[[probes]]
name = "A-X"
column = "ch2"
kind = "proximity"
units = "um"
sensitivity_mv_per_unit = 7.874

[[probes]]
name = "A-Y"
column = "ch3"
kind = "proximity"
units = "um"
sensitivity_mv_per_unit = 7.874

[data]
format = "wav"
full_scale_v = 1.0
signal_units = "V"
"""


def rpm_profile(knots_t, knots_rpm):
    """rpm(t) piecewise linear through the knots, and theta(t) its exact integral (rev)."""
    kt = np.asarray(knots_t, float)
    kr = np.asarray(knots_rpm, float)

    def rpm(t):
        return np.interp(t, kt, kr)

    seg = 0.5 * (kr[1:] + kr[:-1]) * np.diff(kt) / 60.0
    cum = np.concatenate([[0.0], np.cumsum(seg)])

    def theta(t):
        t = np.asarray(t, float)
        k = np.clip(np.searchsorted(kt, t, side="right") - 1, 0, kt.size - 2)
        s = t - kt[k]
        slope = (kr[k + 1] - kr[k]) / (kt[k + 1] - kt[k])
        return cum[k] + (kr[k] * s + 0.5 * slope * s * s) / 60.0

    return rpm, theta


def response_um(rpm, *, fn_rpm=3000.0, zeta=0.05, e_um=50.0):
    """Complex quasi-steady unbalance response in um (peak) at speeds ``rpm``."""
    r = np.asarray(rpm, float) / fn_rpm
    return e_um * r * r / (1.0 - r * r + 2j * zeta * r)


def write_run(path: Path, knots_t, knots_rpm, *, fs=4096.0, seed=0, noise_um=0.2,
              tach_gap_s: tuple[float, float] | None = None) -> dict:
    """Write a 3-channel WAV (tach, A-X, A-Y, volts) and return what it holds."""
    rpm, theta = rpm_profile(knots_t, knots_rpm)
    dur = float(knots_t[-1])
    t = np.arange(int(dur * fs)) / fs
    th = theta(t)
    h = response_um(rpm(t))
    rng = np.random.default_rng(seed)
    x = np.real(h * np.exp(2j * np.pi * th)) + noise_um * rng.standard_normal(t.size)
    y = np.real(h * np.exp(2j * np.pi * th - 0.5j * np.pi)) + noise_um * rng.standard_normal(t.size)
    tach = synth.tach_waveform(th, ramp_rev=0.01)
    if tach_gap_s is not None:
        tach[(t >= tach_gap_s[0]) & (t < tach_gap_s[1])] = 0.0
    data = np.stack([tach, x * SENS_V_PER_UM, y * SENS_V_PER_UM]).T.astype(np.float32)
    wavfile.write(str(path), int(fs), data)
    return dict(fs=fs, rpm=rpm, theta=theta, duration_s=dur, n=t.size)
