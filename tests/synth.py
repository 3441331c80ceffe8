"""Synthetic signals with known answers, shared by the test suites.

Everything here is closed form or solved with scipy; nothing reads files. Angles are in
revolutions, speeds in rpm, times in s; the phasor convention is that of
:mod:`rundash.conventions` (``x = Re(c exp(j 2 pi n theta))``, ``c = A exp(-j lag)``).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np


@dataclass(frozen=True)
class Sweep:
    """A known speed history: ``theta(t)`` in revolutions and ``rpm(t)``."""

    theta: Callable[[np.ndarray], np.ndarray]
    rpm: Callable[[np.ndarray], np.ndarray]
    duration_s: float

    def time_at(self, theta_rev) -> np.ndarray:
        """Times in s where the angle reaches ``theta_rev`` (Newton with bisection)."""
        target = np.asarray(theta_rev, dtype=np.float64)
        lo = np.zeros_like(target)
        hi = np.full_like(target, self.duration_s)
        t = 0.5 * (lo + hi)
        for _ in range(200):
            f = self.theta(t) - target
            lo = np.where(f < 0, t, lo)
            hi = np.where(f >= 0, t, hi)
            step = f / (self.rpm(t) / 60.0)
            tn = t - step
            bad = (tn <= lo) | (tn >= hi) | ~np.isfinite(tn)
            tn = np.where(bad, 0.5 * (lo + hi), tn)
            if np.max(np.abs(tn - t)) < 1e-14:
                t = tn
                break
            t = tn
        return t

    def rev_times(self) -> np.ndarray:
        """True once-per-rev event times (theta = 0, 1, 2, ...) within the duration."""
        n = int(np.floor(self.theta(np.array(self.duration_s))))
        return self.time_at(np.arange(n + 1, dtype=np.float64))


def linear_sweep(rpm0: float, rate_rpm_s: float, duration_s: float) -> Sweep:
    """Constant acceleration: rpm(t) = rpm0 + rate t, theta(0) = 0."""
    f0, a = rpm0 / 60.0, rate_rpm_s / 60.0
    return Sweep(theta=lambda t: f0 * t + 0.5 * a * t * t,
                 rpm=lambda t: rpm0 + rate_rpm_s * t, duration_s=duration_s)


def smooth_sweep(rpm0: float, rpm1: float, duration_s: float) -> Sweep:
    """Non-linear sweep: rpm follows a raised-cosine from rpm0 to rpm1 (S-curve)."""
    d = rpm1 - rpm0
    T = duration_s

    def rpm(t):
        return rpm0 + 0.5 * d * (1.0 - np.cos(np.pi * t / T))

    def theta(t):
        return (rpm0 * t + 0.5 * d * (t - T / np.pi * np.sin(np.pi * t / T))) / 60.0

    return Sweep(theta=theta, rpm=rpm, duration_s=duration_s)


def exp_coast_down(rpm0: float, tau_s: float, duration_s: float) -> Sweep:
    """Coast-down with rpm(t) = rpm0 exp(-t / tau)."""
    return Sweep(theta=lambda t: rpm0 * tau_s / 60.0 * (1.0 - np.exp(-t / tau_s)),
                 rpm=lambda t: rpm0 * np.exp(-t / tau_s), duration_s=duration_s)


def tach_waveform(theta, pulses_per_rev=1, *, ramp_rev=0.01, duty=0.3, low=0.0, high=5.0):
    """Tach voltage from the shaft angle: trapezoid pulses with linear edges.

    The rising edge crosses the mid level exactly at ``theta * pulses_per_rev`` integer,
    so linear interpolation of the threshold crossing is exact while the ramp spans
    more than one sample. ``ramp_rev`` is the half-width of an edge in pulse cycles.
    """
    phi = np.mod(np.asarray(theta) * pulses_per_rev + 0.5, 1.0) - 0.5
    rise = np.clip(0.5 + phi / (2 * ramp_rev), 0.0, 1.0)
    fall = np.clip(0.5 - (phi - duty) / (2 * ramp_rev), 0.0, 1.0)
    return low + (high - low) * np.minimum(rise, fall)


def corrupt_events(times, rng, *, missing=0.0, extra=0.0, jitter_s=None):
    """Drop a fraction ``missing`` of events, add a fraction ``extra`` at random places
    between events, and add Gaussian timing jitter (array or scalar, s rms)."""
    t = np.asarray(times, dtype=np.float64).copy()
    if jitter_s is not None:
        t = t + rng.standard_normal(t.size) * jitter_s
    n = t.size
    keep = np.ones(n, bool)
    n_miss = int(round(missing * n))
    if n_miss:
        # never the first and last 5: they define the record's extent
        idx = rng.choice(np.arange(5, n - 5), size=n_miss, replace=False)
        keep[idx] = False
    n_extra = int(round(extra * n))
    spurious = np.empty(0)
    if n_extra:
        j = rng.choice(np.arange(5, n - 6), size=n_extra, replace=False)
        frac = rng.uniform(0.2, 0.8, n_extra)
        spurious = t[j] + frac * (t[j + 1] - t[j])
    return np.sort(np.concatenate([t[keep], spurious]))


def probe_signal(theta, amp, lag_deg, *, harmonics=(), rng=None, snr_db=None, offset=0.0):
    """x = amp cos(2 pi theta - lag) + sum of (n, amp_n, lag_n) harmonics + noise.

    ``snr_db`` is the ratio of the 1X power (amp^2 / 2) to the white noise variance.
    """
    theta = np.asarray(theta)
    x = amp * np.cos(2 * np.pi * theta - np.radians(lag_deg)) + offset
    for n, a_n, lag_n in harmonics:
        x = x + a_n * np.cos(2 * np.pi * n * theta - np.radians(lag_n))
    if snr_db is not None:
        sigma = np.sqrt(amp * amp / 2.0 / 10 ** (snr_db / 10.0))
        x = x + sigma * rng.standard_normal(theta.shape)
    return x


def sdof_unbalance_response(sweep: Sweep, fs, *, fn_hz, zeta, e_m=1e-5, t_end=None):
    """Forced response of m x'' + c x' + k x = m e w^2 cos(2 pi theta) by solve_ivp.

    Mass-normalised: x'' + 2 zeta wn x' + wn^2 x = e w(t)^2 cos(2 pi theta(t)), with
    w = 2 pi rpm / 60. Returns (t, x) sampled at ``fs`` (x in m). The state starts at
    the quasi-static steady response of the first instant to limit the start transient.
    """
    from scipy.integrate import solve_ivp

    wn = 2 * np.pi * fn_hz
    t_end = sweep.duration_s if t_end is None else t_end
    t = np.arange(int(np.floor(t_end * fs)) + 1) / fs

    def rhs(tt, y):
        w = 2 * np.pi * sweep.rpm(tt) / 60.0
        f = e_m * w * w * np.cos(2 * np.pi * sweep.theta(tt))
        return [y[1], f - 2 * zeta * wn * y[1] - wn * wn * y[0]]

    w0 = 2 * np.pi * sweep.rpm(0.0) / 60.0
    h = e_m * w0 ** 2 / (wn ** 2 - w0 ** 2 + 2j * zeta * wn * w0)
    y0 = [h.real, -w0 * h.imag]
    sol = solve_ivp(rhs, (0.0, t_end), y0, t_eval=t, method="DOP853", rtol=1e-9,
                    atol=1e-12 * e_m)
    return t, sol.y[0]


def piecewise_sweep(knots_t, knots_rpm) -> Sweep:
    """rpm(t) piecewise linear through the knots (holds, ramps, a stop), theta(t) its exact
    integral in revolutions (a quadratic on each piece)."""
    kt = np.asarray(knots_t, dtype=np.float64)
    kr = np.asarray(knots_rpm, dtype=np.float64)
    cum = np.concatenate([[0.0], np.cumsum(0.5 * (kr[1:] + kr[:-1]) * np.diff(kt) / 60.0)])

    def rpm(t):
        return np.interp(t, kt, kr)

    def theta(t):
        t = np.asarray(t, dtype=np.float64)
        k = np.clip(np.searchsorted(kt, t, side="right") - 1, 0, kt.size - 2)
        s = t - kt[k]
        slope = (kr[k + 1] - kr[k]) / (kt[k + 1] - kt[k])
        return cum[k] + (kr[k] * s + 0.5 * slope * s * s) / 60.0

    return Sweep(theta=theta, rpm=rpm, duration_s=float(kt[-1]))


def notch_tach(theta, width_deg, *, gap=5.0, depth=5.0):
    """A proximity tach over a keyway notch with sharp edges: ``gap`` volts, ``gap - depth``
    for ``width_deg`` of each revolution from theta = 0 (the falling edge is the event)."""
    phase = np.mod(np.asarray(theta), 1.0)
    return np.where(phase < width_deg / 360.0, gap - depth, gap)
