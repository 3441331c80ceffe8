"""Sweep-rate-free critical speeds: transient modal identification of 1X vectors.

A run-up or coast-down crosses a critical speed at a finite rate, so the 1X vectors are not
the steady-state response the API 684 half-power reading assumes: the apparent peak moves
in the sweep direction, drops and widens (F. M. Lewis 1932). This module fits a modal
model to the measured vectors *through the run's own speed-time history* and reports the
steady-state critical speed and amplification factor of the fitted model, which no longer
depend on the sweep rate.

Model
-----
Each mode ``k`` is a single-degree-of-freedom oscillator driven by unbalance,

.. math::

    \\ddot q_k + 2\\zeta_k\\omega_k \\dot q_k + \\omega_k^2 q_k
        = (\\Omega^2 - i\\dot\\Omega)\\, e^{i\\Theta(t)},

(mass-normalised; ``Theta`` the shaft angle in rad, ``Omega = dTheta/dt``; the
``-i dOmega/dt`` term is the tangential force of the accelerating unbalance, Thomson and
Dahleh sec. 3.3 for the steady part). The 1X phasor of probe ``p`` (phase convention of
:mod:`rundash.conventions`) is

.. math::

    c_p = \\sum_k \\left(R_{pk}\\, \\bar A_k + \\overline{R_{pk}}\\, \\bar B_k\\right)
          + C_{0p} + C_{1p}\\,(N - N_m)/N_m,

``q_k = A_k(t) e^{i\\Theta}``; ``\\bar A_k`` is the mean of ``A_k`` over each block of
whole revolutions and ``\\bar B_k`` the mean of ``conj(A_k) e^{-2i\\Theta}``, i.e. exactly
what computed order tracking (:mod:`rundash.dsp.orders`) measures from the signal
``Re(R q)``: the per-revolution DFT of a changing amplitude keeps a small conjugate
part (``\\bar B``, below 1 % of ``\\bar A`` here). ``R_pk`` is the complex modal
participation of mode k at probe p (the mode shape times the modal unbalance);
``C_0, C_1`` are a residual (modes outside the band, imperfect slow-roll compensation).
In steady state ``A_k = r^2 / (1 - r^2 + 2 i zeta r)``, ``r = Omega / omega_k``: the same
normalisation as :func:`rundash.analysis.amplification.fit_modes`.

Exact in time
-------------
Splitting the oscillator into its two poles ``lambda = omega (-zeta +- sqrt(zeta^2 - 1))``
gives first-order equations ``w' = lambda w + F e^{i Theta}``; in the rotating frame
``w = u e^{i Theta}``, ``u' = (lambda - i Omega) u + F``. Over one block of R whole
revolutions with the block's mean speed (the order tracker's own speed),
``e^{-i Omega h} = 1`` and the equation integrates in closed form: the state at the next
block, the block mean of ``u`` and of its conjugate part are exact for a shaft turning at
constant speed within each block. The recursion over blocks is evaluated with cumulative
sums in chunks (no Python loop over revolutions). The error of the constant-speed block
against a continuously accelerating shaft is of second order in the speed change per
block (below 1e-3 of the response at 1000 rpm/s through 3000 rpm; see the tests, which
compare with :func:`scipy.signal.lsim` integrations of the equation of motion).

Fit
---
Given the natural frequencies and damping ratios, the model is linear in the complex
participations and residual terms; they are eliminated by linear least squares (the
variable projection method of Golub and Pereyra), and only ``(omega_k, zeta_k)`` are
searched by :func:`scipy.optimize.least_squares`. All probes of a run share one design
matrix, so one set of modes costs one factorisation per evaluation whatever the number of
probes. Probes are weighted by their own noise level (re-estimated from the residuals).

Readings
--------
Per mode: the natural frequency, the damping ratio, the steady-state unbalance-response
peak ``fn / sqrt(1 - 2 zeta^2)`` and its half-power AF in closed form
(:func:`unbalance_half_power_af`). Per probe: the peaks of the fitted model's steady
response (all modes and the residual) with their API 684 half-power AF read on that noise
free curve (:func:`rundash.analysis.amplification.half_power`). Uncertainties: a dependent
wild bootstrap over revolutions of the fit residuals (as in
:mod:`rundash.analysis.compare`), each replicate refitted.

References
----------
F. M. Lewis, "Vibration during acceleration through a critical speed", Trans. ASME 54
(1932) 253-261 (the sweep shift).
American Petroleum Institute, API RP 684, 2nd ed., 2005 (half-power amplification factor;
edition from memory).
G. H. Golub and V. Pereyra, "The differentiation of pseudo-inverses and nonlinear least
squares problems whose variables separate", SIAM J. Numer. Anal. 10 (1973) 413-432.
W. T. Thomson and M. D. Dahleh, "Theory of Vibration with Applications", 5th ed., Prentice
Hall, 1998, sec. 3.3 (rotating unbalance).
X. Shao, "The dependent wild bootstrap", J. American Statistical Association 105 (2010)
218-235.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from typing import Sequence

import numpy as np
from scipy import linalg, optimize, signal

from rundash.analysis.amplification import half_power
from rundash.errors import AnalysisError, invalid_value

__all__ = [
    "SweepHistory", "sweep_history", "mode_response", "unbalance_peak_ratio",
    "unbalance_half_power_af", "TransientMode", "ProbeReading", "TransientFit",
    "fit_transient", "Cluster", "RunModes", "identify_modes",
]

#: Smallest and largest damping ratios searched.
ZETA_BOUNDS = (0.002, 0.9)
#: Decay times integrated before the first fitted block (steady start, error e^-10).
PRE_ROLL_DECAYS = 10.0
#: Smallest relative drop of the weighted misfit for one more mode to count.
MIN_GAIN = 0.10
_CHUNK_DECAY = 500.0  # e-folds per cumulative-sum chunk (e^500 x |g| stays below 1e300)


# --------------------------------------------------------------------------- closed forms
def unbalance_peak_ratio(zeta: float) -> float | None:
    """Peak speed of an SDOF unbalance response over its natural frequency.

    ``1 / sqrt(1 - 2 zeta^2)``; ``None`` for ``zeta >= 1/sqrt(2)`` (no peak). Source:
    Thomson and Dahleh, 5th ed., sec. 3.3.

    >>> round(unbalance_peak_ratio(0.05), 6)
    1.002509
    """
    q = 1.0 - 2.0 * zeta * zeta
    return 1.0 / math.sqrt(q) if q > 0 else None


def unbalance_half_power_af(zeta: float) -> float | None:
    """Exact half-power AF of the SDOF unbalance response (API 684 definition).

    With ``X(r) = r^2 / sqrt((1 - r^2)^2 + (2 zeta r)^2)``, peak ``Xp = 1 / (2 zeta
    sqrt(1 - zeta^2))`` at ``rp = 1 / sqrt(1 - 2 zeta^2)``, the speeds where
    ``X = Xp / sqrt(2)`` are the roots ``s = r^2`` of ``(1 - L) s^2 + L (2 - 4 zeta^2) s
    - L = 0`` with ``L = Xp^2 / 2``; ``AF = rp / (r2 - r1)``. ``None`` when the response
    does not fall to the half-power level on both sides (``Xp <= sqrt(2)``, zeta above
    about 0.38) or has no peak.

    >>> round(unbalance_half_power_af(0.05), 3), round(unbalance_half_power_af(0.2), 3)
    (9.9, 2.073)
    """
    rp = unbalance_peak_ratio(zeta)
    if rp is None or not zeta > 0:
        return None
    lev = 1.0 / (8.0 * zeta * zeta * (1.0 - zeta * zeta))  # Xp^2 / 2
    if lev <= 1.0:
        return None
    a, b, c = 1.0 - lev, lev * (2.0 - 4.0 * zeta * zeta), -lev
    disc = b * b - 4.0 * a * c
    if disc <= 0:
        return None
    s = sorted(((-b + math.sqrt(disc)) / (2 * a), (-b - math.sqrt(disc)) / (2 * a)))
    if s[0] <= 0:
        return None
    return rp / (math.sqrt(s[1]) - math.sqrt(s[0]))


# --------------------------------------------------------------------------- time history
@dataclass(frozen=True)
class SweepHistory:
    """The run's speed-time history as contiguous integration steps.

    Each data block of whole revolutions is one step; a gap between blocks (revolutions
    that were not tracked) is filled with one-revolution steps on a cubic angle through
    the gap that meets the neighbouring blocks' speeds.

    Attributes
    ----------
    t_start_s, h_s : ndarray, shape (m,)
        Start time and duration of each step in s.
    revs : ndarray of int, shape (m,)
        Whole revolutions in each step.
    omega : ndarray, shape (m,)
        Mean angular speed of each step, rad/s (``2 pi revs / h``).
    force : ndarray of complex, shape (m,)
        Unbalance forcing per unit modal unbalance, ``Omega^2 - i dOmega/dt``.
    data_step : ndarray of int, shape (n,)
        Step index of each data block (in the caller's order).
    """

    t_start_s: np.ndarray
    h_s: np.ndarray
    revs: np.ndarray
    omega: np.ndarray
    force: np.ndarray
    data_step: np.ndarray

    @property
    def n_steps(self) -> int:
        return int(self.h_s.size)


def sweep_history(time_s, speed_rpm, *, revs_per_block: int = 1,
                  rev_index=None) -> SweepHistory:
    """Integration steps from the blocks of an order track.

    Parameters
    ----------
    time_s : array_like, shape (n,)
        Block times in s: the midpoint between the block's first and last reference event
        (:class:`rundash.dsp.OrderTrack`).
    speed_rpm : array_like, shape (n,)
        Block mean speeds in rpm (``60 R / block duration``).
    revs_per_block : int
        Revolutions per block R.
    rev_index : array_like of int, shape (n,), optional
        First revolution of each block; gaps (revolutions not tracked) are taken from it.
        Without it, a gap is a time gap of at least half a revolution.

    Returns
    -------
    SweepHistory
    """
    t = np.asarray(time_s, dtype=float)
    s = np.asarray(speed_rpm, dtype=float)
    if t.ndim != 1 or t.size < 2 or s.shape != t.shape:
        raise AnalysisError(invalid_value("time_s/speed_rpm", f"shapes {t.shape}, {s.shape}",
                                          "two 1-D arrays of equal length >= 2"))
    if not (np.all(np.isfinite(t)) and np.all(np.isfinite(s)) and np.all(s > 0)):
        raise AnalysisError(invalid_value("speed_rpm", "non-finite or non-positive values",
                                          "finite positive block speeds"))
    if isinstance(revs_per_block, bool) or int(revs_per_block) != revs_per_block or revs_per_block < 1:
        raise AnalysisError(invalid_value("revs_per_block", revs_per_block, "an integer >= 1"))
    R = int(revs_per_block)
    order = np.argsort(t, kind="stable")
    ts, ss = t[order], s[order]
    h = 60.0 * R / ss
    ta, tb = ts - 0.5 * h, ts + 0.5 * h
    gap_t = ta[1:] - tb[:-1]
    if np.any(gap_t < -0.25 * np.minimum(h[1:], h[:-1])):
        raise AnalysisError(invalid_value("time_s", "overlapping blocks",
                                          "blocks of whole revolutions in time order"))
    if rev_index is not None:
        ri = np.asarray(rev_index)[order].astype(np.int64)
        gap_revs = ri[1:] - ri[:-1] - R
        if np.any(gap_revs < 0):
            raise AnalysisError(invalid_value("rev_index", "overlapping blocks",
                                              f"blocks at least {R} revolutions apart"))
    else:
        mean_rate = 0.5 * (ss[1:] + ss[:-1]) / 60.0
        gap_revs = np.where(gap_t * mean_rate >= 0.5,
                            np.maximum(np.round(gap_t * mean_rate), 1), 0).astype(np.int64)
    n = ts.size
    # a gap of k untracked revolutions becomes k one-revolution steps on a cubic
    # (Hermite) angle through the gap: k revolutions in the gap's time, with the speeds
    # the neighbouring blocks reach at its edges (their mean speeds moved by half a
    # block at their own rate of change)
    fill = np.where(gap_revs > 0, gap_revs, 0)
    step_of = np.arange(n) + np.concatenate([[0], np.cumsum(fill)])
    m = n + int(fill.sum())
    t0 = np.empty(m)
    hh = np.empty(m)
    revs = np.ones(m, np.int64)
    t0[step_of], hh[step_of], revs[step_of] = ta, h, R
    f = ss / 60.0
    df = np.gradient(f, ts) if n >= 2 else np.zeros(n)
    for g in np.flatnonzero(fill):
        k = int(fill[g])
        span = max(ta[g + 1] - tb[g], 1e-9)
        fa = max(f[g] + 0.5 * h[g] * df[g], 1e-9)
        fb = max(f[g + 1] - 0.5 * h[g + 1] * df[g + 1], 1e-9)
        edges = _hermite_times(span, float(k), fa, fb)
        a = step_of[g] + 1
        hh[a:a + k] = np.diff(edges)
        t0[a:a + k] = tb[g] + edges[:-1]
    omega = 2.0 * np.pi * revs / hh
    tm = t0 + 0.5 * hh
    alpha = np.gradient(omega, tm) if m >= 3 else np.zeros(m)
    data_step = np.empty(n, np.int64)
    data_step[order] = step_of
    return SweepHistory(t0, hh, revs, omega, omega * omega - 1j * alpha, data_step)


def _hermite_times(span: float, k: float, fa: float, fb: float) -> np.ndarray:
    """Times 0..span where the cubic Hermite angle (0 -> k revolutions, speed fa -> fb in
    rev/s) passes 0, 1, ..., k; linear in time where the cubic is not monotone."""
    targets = np.arange(int(k) + 1, dtype=float)

    def theta(tau):
        x = tau / span
        h10, h01, h11 = (x**3 - 2 * x**2 + x,
                              -2 * x**3 + 3 * x**2, x**3 - x**2)
        return h10 * span * fa + h01 * k + h11 * span * fb  # theta(0) = 0: no h00 term

    grid = np.linspace(0.0, span, 64 * int(k) + 2)
    th = theta(grid)
    if np.any(np.diff(th) <= 0):
        return targets * (span / k)
    out = np.interp(targets, th, grid)
    for _ in range(3):  # Newton polish on the cubic
        x = out / span
        dth = (fa * (3 * x**2 - 4 * x + 1) + k / span * (-6 * x**2 + 6 * x)
               + fb * (3 * x**2 - 2 * x))
        out = np.clip(out - (theta(out) - targets) / np.maximum(dth, 1e-12), 0.0, span)
    out[0], out[-1] = 0.0, span
    return out


def _recursion(lamh: np.ndarray, g: np.ndarray, u0: np.ndarray) -> np.ndarray:
    """``u[:, k+1] = exp(lamh[:, k]) u[:, k] + g[:, k]``, ``u[:, 0] = u0``, rows at once.

    Chunked cumulative sums: inside a chunk ``u_k = e^{L_k} (u_s + sum_j g_j e^{-L_{j+1}})``
    with ``L`` the cumulative ``lamh`` from the chunk start; a chunk ends before the decay
    reaches ``_CHUNK_DECAY`` e-folds, far from overflow. The rounding error stays at
    ``eps / zeta`` of the response whatever the chunk length (the sum is dominated by its
    latest terms).
    """
    rows, n = g.shape
    L = np.concatenate([np.zeros((rows, 1), np.complex128), np.cumsum(lamh, axis=1)], axis=1)
    decay = np.max(-L.real, axis=0)  # non-decreasing
    u = np.empty((rows, n + 1), np.complex128)
    u[:, 0] = u0
    s = 0
    while s < n:
        e = int(np.searchsorted(decay, decay[s] + _CHUNK_DECAY, side="right")) - 1
        e = min(max(e, s + 1), n)
        if e == s + 1:
            u[:, e] = np.exp(lamh[:, s]) * u[:, s] + g[:, s]
        else:
            loc = L[:, s + 1:e + 1] - L[:, s:s + 1]
            acc = np.cumsum(g[:, s:e] * np.exp(-loc), axis=1)
            u[:, s + 1:e + 1] = np.exp(loc) * (u[:, s:s + 1] + acc)
        s = e
    return u


def _pole_means(hist: SweepHistory, lo: int, hi: int, lam: np.ndarray):
    """Block means of ``u`` and of ``conj(u) e^{-2i Omega tau}`` for steps lo..hi-1, one
    row per pole in ``lam``."""
    lam = np.asarray(lam, np.complex128)[:, None]
    om = hist.omega[None, lo:hi]
    h = hist.h_s[None, lo:hi]
    F = hist.force[None, lo:hi]
    mu = lam - 1j * om
    alpha = -F / mu  # steady state of u in each step
    lamh = lam * h
    E = np.exp(lamh)
    u = _recursion(lamh, alpha * (1.0 - E), alpha[:, 0])
    beta = u[:, :-1] - alpha
    ubar = alpha + beta * (E - 1.0) / (mu * h)
    cbar = np.conj(beta) * (np.conj(E) - 1.0) / ((np.conj(lam) - 1j * om) * h)
    return ubar, cbar


def _poles(fn_hz: float, zeta: float) -> tuple[complex, complex]:
    w = 2.0 * np.pi * fn_hz
    root = np.sqrt(complex(zeta * zeta - 1.0))
    return w * (-zeta + root), w * (-zeta - root)


def _intervals(hist: SweepHistory, steps: np.ndarray, pre_s: float) -> list[tuple[int, int]]:
    """Step ranges [lo, hi) to integrate: each run of needed steps with its pre-roll."""
    steps = np.unique(steps)
    if steps.size == 0:
        return []
    t0 = hist.t_start_s
    lo = np.searchsorted(t0, t0[steps] - pre_s, side="left")
    hi = steps + 1
    start = np.concatenate([[True], lo[1:] > hi[:-1]])
    first = np.flatnonzero(start)
    last = np.concatenate([first[1:] - 1, [steps.size - 1]])
    return [(int(lo[a]), int(hi[b])) for a, b in zip(first, last)]


def _mode_means(hist: SweepHistory, intervals, fn_hz: float, zeta: float):
    """``A`` and ``B`` block means of one mode over the steps of ``intervals``."""
    lp, lm = _poles(fn_hz, zeta)
    d = lp - lm
    a = np.zeros(hist.n_steps, np.complex128)
    b = np.zeros(hist.n_steps, np.complex128)
    for lo, hi in intervals:
        ub, cb = _pole_means(hist, lo, hi, np.array([lp, lm]))
        a[lo:hi] = (ub[0] - ub[1]) / d
        b[lo:hi] = (cb[0] - cb[1]) / np.conj(d)
    return a, b


def mode_response(time_s, speed_rpm, fn_rpm: float, zeta: float, residue=1.0 + 0j, *,
                  revs_per_block: int = 1, rev_index=None, conjugate_part: bool = True,
                  pre_roll_s: float | None = None) -> np.ndarray:
    """1X vectors of one unbalance-driven mode along a measured speed history.

    What computed order tracking reads, block by block, from the probe signal
    ``Re(residue * q(t))`` of the mode of the module docstring; the state starts in the
    steady state ``pre_roll_s`` before the first block (default: ten decay times, and
    never before the first block).

    Parameters
    ----------
    time_s, speed_rpm : array_like, shape (n,)
        Block times (midpoints) and block mean speeds, as :class:`rundash.dsp.OrderTrack`.
    fn_rpm : float
        Undamped natural frequency in rpm.
    zeta : float
        Damping ratio, 0 < zeta < 1.
    residue : complex
        Complex participation R (the response tends to ``-R`` far above ``fn``).
    revs_per_block, rev_index :
        As :func:`sweep_history`.
    conjugate_part : bool
        Include the conjugate part the per-revolution DFT picks up.

    Returns
    -------
    ndarray of complex, shape (n,)

    Examples
    --------
    At a slow sweep the response is the steady one, ``r^2 / (1 - r^2 + 2 i zeta r)``:

    >>> import numpy as np
    >>> n = np.linspace(2000.0, 4000.0, 20001)            # 0.1 rpm per revolution
    >>> t = np.concatenate([[0.0], np.cumsum(60.0 / n[1:])])
    >>> c = mode_response(t, n, 3000.0, 0.05)
    >>> r = n[10000] / 3000.0
    >>> bool(abs(c[10000] / (r * r / (1 - r * r + 0.1j * r)) - 1) < 0.01)
    True
    """
    if not (math.isfinite(fn_rpm) and fn_rpm > 0):
        raise AnalysisError(invalid_value("fn_rpm", fn_rpm, "a positive natural frequency in rpm"))
    if not 0 < zeta < 1:
        raise AnalysisError(invalid_value("zeta", zeta, "a damping ratio between 0 and 1"))
    hist = sweep_history(time_s, speed_rpm, revs_per_block=revs_per_block, rev_index=rev_index)
    fn_hz = fn_rpm / 60.0
    if pre_roll_s is None:
        pre_roll_s = PRE_ROLL_DECAYS / (zeta * 2 * np.pi * fn_hz)
    iv = _intervals(hist, hist.data_step, pre_roll_s)
    a, b = _mode_means(hist, iv, fn_hz, zeta)
    R = complex(residue)
    out = R * a[hist.data_step]
    if conjugate_part:
        out = out + np.conj(R) * b[hist.data_step]
    return out


# --------------------------------------------------------------------------- results
@dataclass(frozen=True)
class TransientMode:
    """One fitted mode.

    Attributes
    ----------
    fn_rpm, zeta : float
        Undamped natural frequency (rpm) and damping ratio.
    peak_speed_rpm : float or None
        Steady-state unbalance-response peak of the mode alone, ``fn / sqrt(1 - 2 zeta^2)``.
    af : float or None
        Half-power AF of the mode alone, closed form (:func:`unbalance_half_power_af`).
    participation : tuple of complex
        Complex participation ``R_pk`` per probe (|c| units; the steady response of the mode
        at probe p is ``R_pk r^2 / (1 - r^2 + 2 i zeta r)``).
    *_std : float or None
        One-sigma bootstrap spreads (None without bootstrap); ``*_std_fit`` the
        linearised (Jacobian) one-sigma values of the fit itself.
    """

    fn_rpm: float
    zeta: float
    peak_speed_rpm: float | None
    af: float | None
    participation: tuple[complex, ...]
    fn_std_rpm: float | None = None
    zeta_std: float | None = None
    peak_speed_std_rpm: float | None = None
    af_std: float | None = None
    fn_std_fit_rpm: float | None = None
    zeta_std_fit: float | None = None

    @property
    def critically_damped_af(self) -> float | None:  # pragma: no cover - convenience
        return self.af


@dataclass(frozen=True)
class ProbeReading:
    """A peak of one probe's fitted steady-state response (the sweep-free reading).

    ``speed_rpm`` is the peak speed of the model's steady response at the probe (every
    mode and the residual), ``peak_amplitude`` its height in |c| units, ``af`` the API 684
    half-power AF read on that curve inside the fitted band (None when the curve does not
    fall to the half-power level on both sides there; ``af_note`` says why), ``mode`` the
    index of the nearest fitted mode. ``*_std`` are bootstrap spreads.
    """

    probe: int
    mode: int
    speed_rpm: float
    peak_amplitude: float
    af: float | None
    af_note: str = ""
    n1_rpm: float | None = None
    n2_rpm: float | None = None
    speed_std_rpm: float | None = None
    af_std: float | None = None


@dataclass(frozen=True)
class TransientFit:
    """Result of :func:`fit_transient` (one set of modes shared by every probe).

    Attributes
    ----------
    modes : tuple of TransientMode
        Sorted by natural frequency.
    constant, slope : ndarray of complex, shape (P,)
        Residual term per probe: ``C0 + C1 (N - speed_ref_rpm) / speed_ref_rpm``.
    band_rpm : (float, float)
        Speed band of the fitted blocks.
    n_blocks : int
        Blocks fitted.
    rms, noise : ndarray, shape (P,)
        Rms of the complex misfit per probe, and the noise sigma per component from
        second differences of the residuals (|c| units, per block; the noise of each
        fitted group is this times a local factor that follows its speed).
    misfit_ratio : float
        Pooled misfit over the local noise: about 1 when the model explains all but the
        noise (:meth:`misfit_ratio_in` for one band).
    relative_error : float
        Rms misfit over rms data, pooled over probes.
    readings : tuple of ProbeReading
    """

    modes: tuple[TransientMode, ...]
    constant: np.ndarray
    slope: np.ndarray
    speed_ref_rpm: float
    band_rpm: tuple[float, float]
    n_blocks: int
    rms: np.ndarray
    noise: np.ndarray
    misfit_ratio: float
    relative_error: float
    success: bool
    message: str
    readings: tuple[ProbeReading, ...] = ()
    n_boot: int = 0
    rss_weighted: float = 0.0
    n_obs: int = 0
    n_par: int = 0
    group_speed_rpm: np.ndarray = field(default_factory=lambda: np.empty(0), repr=False)
    group_rss: np.ndarray = field(default_factory=lambda: np.empty(0), repr=False)
    group_noise_ratio2: np.ndarray = field(default_factory=lambda: np.empty(0), repr=False)
    weights: tuple = field(default=(None, None), repr=False)  # (per probe, per group) used

    def misfit_ratio_in(self, band) -> float:
        """``misfit_ratio`` over the fitted blocks with speeds inside ``band``."""
        sel = (self.group_speed_rpm >= band[0]) & (self.group_speed_rpm <= band[1])
        return (float(np.sqrt(np.mean(self.group_noise_ratio2[sel]))) if np.any(sel)
                else math.inf)

    def rss_in(self, band) -> float:
        """Weighted misfit of the fitted group means with speeds inside ``band``."""
        sel = (self.group_speed_rpm >= band[0]) & (self.group_speed_rpm <= band[1])
        return float(np.sum(self.group_rss[sel]))

    def n_obs_in(self, band) -> int:
        sel = (self.group_speed_rpm >= band[0]) & (self.group_speed_rpm <= band[1])
        return int(2 * self.n_probes * np.count_nonzero(sel))

    @property
    def n_probes(self) -> int:
        return int(self.constant.size)

    def steady(self, speed_rpm) -> np.ndarray:
        """Steady-state complex 1X response of every probe, shape (P, n)."""
        s = np.atleast_1d(np.asarray(speed_rpm, dtype=float))
        x = (s - self.speed_ref_rpm) / self.speed_ref_rpm
        out = self.constant[:, None] + self.slope[:, None] * x[None, :] + 0j
        for m in self.modes:
            r = s / m.fn_rpm
            out = out + np.asarray(m.participation)[:, None] * (r * r / (1 - r * r + 2j * m.zeta * r))[None, :]
        return out

    def response(self, time_s, speed_rpm, *, revs_per_block: int = 1, rev_index=None,
                 conjugate_part: bool = True) -> np.ndarray:
        """The fitted model along a speed history (what the order tracker reads), (P, n)."""
        s = np.asarray(speed_rpm, dtype=float)
        x = (s - self.speed_ref_rpm) / self.speed_ref_rpm
        out = self.constant[:, None] + self.slope[:, None] * x[None, :] + 0j
        for m in self.modes:
            for p, R in enumerate(m.participation):
                out[p] += mode_response(time_s, s, m.fn_rpm, m.zeta, R, revs_per_block=revs_per_block,
                                        rev_index=rev_index, conjugate_part=conjugate_part)
        return out


# --------------------------------------------------------------------------- the fit
def _noise_sigma(v: np.ndarray) -> np.ndarray:
    """Noise sigma per component of each row, from second differences (robust)."""
    if v.shape[1] < 5:
        return np.full(v.shape[0], np.nan)
    d2 = v[:, :-2] - 2 * v[:, 1:-1] + v[:, 2:]
    both = np.concatenate([d2.real, d2.imag], axis=1)
    return 1.4826 * np.median(np.abs(both), axis=1) / math.sqrt(6.0)


class _Problem:
    """Variable-projection least squares of one set of modes over selected blocks.

    Consecutive fitted blocks are averaged in groups of ``group`` (data and model alike:
    a linear map applied to both keeps the fit unbiased); at slow sweeps this cuts the
    least-squares size by the group size at no measurable loss (a group spans a few rpm
    against a half-power band of hundreds).
    """

    def __init__(self, hist: SweepHistory, steps: np.ndarray, speed: np.ndarray,
                 data: np.ndarray, weights: np.ndarray, residual: str, conj: bool,
                 pre_s: float, f_ref: float, group: int = 1, fixed=()):
        self.hist, self.steps = hist, steps
        self.starts = np.arange(0, steps.size, max(int(group), 1))
        self.counts = np.diff(np.append(self.starts, steps.size)).astype(float)
        self.speed = self._avg(speed)
        self.data = self._avg(data)  # (G, P) complex group means
        self.Y = np.vstack([self.data.real, self.data.imag])  # (2G, P)
        self.w = weights
        self.rw = np.ones(self.n_groups)
        self.conj = conj
        self.iv = _intervals(hist, steps, pre_s)
        self.f_ref = f_ref
        self.s_ref = float(np.median(speed))
        x = (self.speed - self.s_ref) / self.s_ref
        self.res_cols = {"none": [], "constant": [np.ones_like(x) + 0j, 1j * np.ones_like(x)],
                         "linear": [np.ones_like(x) + 0j, 1j * np.ones_like(x), x + 0j, 1j * x]}[residual]
        self._cache: dict = {}
        # modes held at given (fn, zeta): their columns are computed once
        self.fixed_cols = []
        for fn, z in fixed:
            iv = _intervals(hist, steps, min(PRE_ROLL_DECAYS / (z * 2 * np.pi * fn / 60.0), 300.0))
            self.fixed_cols += self._columns(iv, fn, z)

    def _columns(self, iv, fn: float, z: float) -> list[np.ndarray]:
        key = (fn, z, iv is self.iv)
        hit = self._cache.get(key)
        if hit is not None:
            return hit
        a, b = _mode_means(self.hist, iv, fn / 60.0, z)
        a, b = self._avg(a[self.steps]), self._avg(b[self.steps])
        cols = [a + b, 1j * (a - b)] if self.conj else [a, 1j * a]
        # a finite-difference Jacobian moves one mode at a time: keep the others' columns
        if len(self._cache) > 64:
            self._cache.clear()
        self._cache[key] = cols
        return cols

    def _avg(self, a: np.ndarray) -> np.ndarray:
        if self.starts.size == self.steps.size:
            return a
        out = np.add.reduceat(a, self.starts, axis=0)
        return out / (self.counts if out.ndim == 1 else self.counts[:, None])

    @property
    def n_groups(self) -> int:
        return int(self.starts.size)

    def params(self, x: np.ndarray) -> list[tuple[float, float]]:
        return [(float(x[2 * k]) * self.f_ref, float(math.exp(x[2 * k + 1])))
                for k in range(x.size // 2)]

    def design(self, x: np.ndarray) -> np.ndarray:
        cols = []
        for fn, z in self.params(x):
            cols += self._columns(self.iv, fn, z)
        cols += self.fixed_cols + self.res_cols
        d = np.column_stack(cols)
        return np.vstack([d.real, d.imag])

    def solve(self, x: np.ndarray, Y: np.ndarray | None = None):
        """Design, linear coefficients (ncol, P) and residuals (2M, P) at ``x``.

        The design has a handful of columns: the least squares is solved by the normal
        equations of the column-equilibrated design (Cholesky), with an SVD fallback when
        they are ill conditioned (measured here: 0.7 ms against 16 ms for numpy's QR and
        56 ms for ``lstsq`` on 9000 x 6 with 15 probes)."""
        D = self.design(x)
        Y = self.Y if Y is None else Y
        rw = np.concatenate([self.rw, self.rw])[:, None]  # row weights (local noise)
        Dw = D * rw
        norm = np.sqrt(np.einsum("ij,ij->j", Dw, Dw))
        norm[norm == 0] = 1.0
        Ds = Dw / norm
        G = Ds.T @ Ds
        try:
            if np.linalg.cond(G) > 1e10:
                raise np.linalg.LinAlgError("ill conditioned")
            cf = linalg.cho_factor(G, check_finite=False)
            coef = linalg.cho_solve(cf, Ds.T @ (Y * rw), check_finite=False) / norm[:, None]
        except (np.linalg.LinAlgError, linalg.LinAlgError):
            coef, *_ = linalg.lstsq(Dw, Y * rw, check_finite=False)
        return D, coef, Y - D @ coef

    def fun(self, x: np.ndarray, Y: np.ndarray | None = None) -> np.ndarray:
        _, _, e = self.solve(x, Y)
        rw = np.concatenate([self.rw, self.rw])[:, None]
        return (e * rw * self.w[None, :]).ravel()

    def local_noise(self, e: np.ndarray, window: int = 31):
        """Noise of the group means from second differences of the residuals ``e`` (2G, P).

        Returns the per-probe sigma (per component) and a per-group factor (pooled over
        probes, running median over ``window`` groups): noise of group g at probe p is
        ``sigma[p] * factor[g]``. The model removes the signal, so the second
        differences hold the noise (and no curvature of the response); the per-revolution
        noise of white waveform noise grows with speed (fewer samples per revolution).
        """
        G = self.n_groups
        ec = e[:G] + 1j * e[G:]
        if G < 8:
            sig = np.sqrt(np.mean(np.abs(ec) ** 2, axis=0) / 2.0)
            return np.maximum(sig, 1e-300), np.ones(G)
        d2 = ec[:-2] - 2 * ec[1:-1] + ec[2:]  # (G-2, P)
        sig = 1.4826 * np.median(np.abs(np.concatenate([d2.real, d2.imag])), axis=0) / math.sqrt(6.0)
        sig = np.maximum(sig, 1e-300)
        q = np.mean(np.abs(d2) ** 2 / (12.0 * sig[None, :] ** 2), axis=1)  # ~1
        q = np.concatenate([q[:1], q, q[-1:]])
        w = min(window, G) | 1
        qs = signal.medfilt(np.pad(q, w // 2, mode="edge"), w)[w // 2: w // 2 + G]
        fac = np.sqrt(np.maximum(qs, 1e-12))
        return sig, fac / np.median(fac)  # sig (a MAD) carries the scale


def _fit_x(prob: _Problem, x0: np.ndarray, lo: np.ndarray, hi: np.ndarray, Y=None,
           max_nfev: int | None = None):
    x0 = np.clip(x0, lo + 1e-9, hi - 1e-9)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return optimize.least_squares(prob.fun, x0, bounds=(lo, hi), args=(Y,),
                                      x_scale="jac", max_nfev=max_nfev, xtol=1e-9, ftol=1e-9)


def _readings(fit_modes, steady, band, n_grid: int = 4001) -> list[ProbeReading]:
    grid = np.linspace(band[0], band[1], n_grid)
    H = steady(grid)
    out = []
    peaks_of_modes = np.array([m.peak_speed_rpm or m.fn_rpm for m in fit_modes])
    for p in range(H.shape[0]):
        a = np.abs(H[p])
        top = float(a.max()) if a.size else 0.0
        if top <= 0:
            continue
        idx, props = signal.find_peaks(a, prominence=0.0)
        for i, prom in zip(idx, props["prominences"]):
            if prom < 0.05 * a[i] or a[i] < 0.05 * top:
                continue
            hp = half_power(grid, a, peak_index=int(i))
            k = int(np.argmin(np.abs(peaks_of_modes - hp.nc_rpm)))
            out.append(ProbeReading(p, k, float(hp.nc_rpm), float(hp.peak_amplitude), hp.af,
                                    hp.reason, hp.n1_rpm, hp.n2_rpm))
    return out


def _modes_from(prob: _Problem, x: np.ndarray, coef: np.ndarray, cov: np.ndarray | None):
    K = x.size // 2
    modes = []
    for k, (fn, z) in enumerate(prob.params(x)):
        R = coef[2 * k] + 1j * coef[2 * k + 1]
        fstd = zstd = None
        if cov is not None:
            fstd = float(math.sqrt(max(cov[2 * k, 2 * k], 0.0)) * prob.f_ref)
            zstd = float(math.sqrt(max(cov[2 * k + 1, 2 * k + 1], 0.0)) * z)
        rp = unbalance_peak_ratio(z)
        modes.append(TransientMode(fn, z, fn * rp if rp else None, unbalance_half_power_af(z),
                                   tuple(complex(c) for c in R), fn_std_fit_rpm=fstd,
                                   zeta_std_fit=zstd))
    j = 2 * K + len(prob.fixed_cols)
    P = coef.shape[1]
    c0 = np.zeros(P, complex)
    c1 = np.zeros(P, complex)
    if len(prob.res_cols) >= 2:
        c0 = coef[j] + 1j * coef[j + 1]
    if len(prob.res_cols) == 4:
        c1 = coef[j + 2] + 1j * coef[j + 3]
    order = np.argsort([m.fn_rpm for m in modes])
    return [modes[i] for i in order], c0, c1, order


def _assemble(prob, sol, noise, band, readings=True) -> TransientFit:
    x = sol.x
    D, coef, e = prob.solve(x)
    n_obs = e.size
    n_par = x.size + coef.size
    rss_w = float(np.sum((e * prob.w[None, :]) ** 2))
    cov = None
    try:
        J = sol.jac
        s2 = rss_w / max(n_obs - n_par, 1)
        cov = np.linalg.inv(J.T @ J) * s2
    except (np.linalg.LinAlgError, ValueError):
        cov = None
    modes, c0, c1, _ = _modes_from(prob, x, coef, cov)
    M = prob.n_groups
    ec = e[:M] + 1j * e[M:]
    # per-block equivalent rms (a group mean of g blocks carries 1/g of the noise power)
    rms = np.sqrt(np.mean(np.abs(ec) ** 2 * prob.counts[:, None], axis=0))
    rel = float(np.sqrt(np.sum(np.abs(ec) ** 2) / max(np.sum(np.abs(prob.data) ** 2), 1e-300)))
    ew = e * prob.w[None, :]
    g_rss = np.sum(ew[:M] ** 2 + ew[M:] ** 2, axis=1)
    sig, fac = noise
    en = e / (math.sqrt(2.0) * sig[None, :] * np.concatenate([fac, fac])[:, None])
    g_noise = np.sum(en[:M] ** 2 + en[M:] ** 2, axis=1) / e.shape[1]
    ratio = float(np.sqrt(np.mean(g_noise)))
    noise_block = sig * math.sqrt(float(np.mean(prob.counts)))  # per block, per component
    fit = TransientFit(tuple(modes), c0, c1, prob.s_ref, band, int(prob.steps.size), rms,
                       noise_block, ratio, rel, bool(sol.success), str(sol.message), (), 0, rss_w, int(n_obs),
                       int(n_par), prob.speed.copy(), g_rss, g_noise,
                       (prob.w.copy(), prob.rw.copy()))
    if readings:
        fit = _replace(fit, readings=tuple(_readings(fit.modes, fit.steady, band)))
    return fit


def _replace(obj, **kw):
    from dataclasses import replace
    return replace(obj, **kw)


def _std(vals, min_n: int = 5):
    x = np.asarray([v for v in vals if v is not None and math.isfinite(v)], dtype=float)
    return float(np.std(x, ddof=1)) if x.size >= min_n else None


def _default_band(initial, speed) -> tuple[float, float]:
    fns = [f for f, _ in initial]
    w = float(np.clip(5.0 * max(z for _, z in initial) + 0.08, 0.12, 0.6))
    return (max(min(fns) * (1 - w), float(np.min(speed))), min(max(fns) * (1 + w), float(np.max(speed))))


def fit_transient(time_s, speed_rpm, vectors, *, initial: Sequence[tuple[float, float]],
                  band_rpm: tuple[float, float] | None = None, select=None,
                  revs_per_block: int = 1, rev_index=None,
                  residual: str = "linear", conjugate_part: bool = True,
                  n_boot: int = 0, block_revs: int = 4, seed: int = 0,
                  max_blocks: int = 20000, max_groups: int = 800, reweight: bool = True,
                  max_nfev: int | None = None, fixed: Sequence[tuple[float, float]] = (),
                  _weights=None) -> TransientFit:
    """Fit one set of unbalance-driven modes, shared by every probe, through a measured sweep.

    See the module docstring for the model. The natural frequencies and damping ratios are
    found by nonlinear least squares; the complex participations and residual terms of
    every probe by linear least squares at each step (variable projection).

    Parameters
    ----------
    time_s, speed_rpm : array_like, shape (n,)
        Block times (midpoints, s) and mean speeds (rpm) of the order track, any segment
        kinds (run-up, coast-down, holds: the model follows the whole history).
    vectors : array_like of complex, shape (P, n) or (n,)
        1X phasors of P probes (:mod:`rundash.conventions`), slow-roll compensated or not
        (the residual's constant absorbs a constant vector).
    initial : sequence of (fn_rpm, zeta)
        Starting values, one pair per mode (e.g. the quasi-steady criticals).
    band_rpm : (float, float), optional
        Speeds of the blocks fitted; default from ``initial``: ``fn (1 -+ w)`` with
        ``w = 5 zeta + 0.08`` clipped to 0.12-0.6.
    select : array_like of bool, shape (n,), optional
        Blocks that may be fitted (e.g. one run direction); the model still integrates
        through every block before them.
    revs_per_block, rev_index :
        As :func:`sweep_history`.
    residual : {'none', 'constant', 'linear'}
        Residual term per probe.
    conjugate_part : bool
        Model the conjugate part the per-revolution DFT picks up (order tracking); False
        for vectors from a narrow-band tracker (Vold–Kalman).
    n_boot : int
        Bootstrap replicates for the ``*_std`` values (0: none).
    block_revs : int
        Consecutive fitted blocks sharing one random phasor in the bootstrap.
    seed : int
        Seed of the bootstrap.
    max_blocks : int
        More selected blocks than this are thinned evenly in time.
    max_groups : int
        Consecutive fitted blocks are averaged in groups so that at most this many group
        means enter the least squares (data and model averaged alike).
    reweight : bool
        Refit once with each probe and each stretch of the band weighted by its own noise
        (second differences of the residuals).
    max_nfev : int, optional
        Largest number of function evaluations of each optimisation.
    fixed : sequence of (fn_rpm, zeta)
        Modes held at these values (their participations are still fitted), e.g. the
        modes of neighbouring bands; they are not reported.

    Returns
    -------
    TransientFit

    Examples
    --------
    A 1000 rpm/s run-up through a 3000 rpm mode (zeta 0.05): the fit returns the steady
    values that the apparent peak (about 3 % high at this rate) misses.

    >>> import numpy as np
    >>> n = np.arange(1500.0, 4500.0, 1000.0 * 60.0 / 3000.0)      # ~0.33 rpm per revolution
    >>> t = np.cumsum(60.0 / n)
    >>> c = mode_response(t, n, 3000.0, 0.05, 2.0 - 1.0j)
    >>> fit = fit_transient(t, n, c, initial=[(3090.0, 0.04)])
    >>> m = fit.modes[0]
    >>> round(m.fn_rpm, 1), round(m.zeta, 4), round(m.af, 2)
    (3000.0, 0.05, 9.9)
    """
    t = np.asarray(time_s, dtype=float)
    s = np.asarray(speed_rpm, dtype=float)
    v = np.asarray(vectors, dtype=complex)
    if v.ndim == 1:
        v = v[None, :]
    if v.ndim != 2 or v.shape[1] != t.size:
        raise AnalysisError(invalid_value("vectors", f"shape {v.shape}", f"(P, {t.size}) complex"))
    if residual not in ("none", "constant", "linear"):
        raise AnalysisError(invalid_value("residual", residual, "'none', 'constant' or 'linear'"))
    init = [(float(f), float(z)) for f, z in initial]
    if not init or len(init) > 6 or any(not (f > 0 and 0 < z < 1) for f, z in init):
        raise AnalysisError(invalid_value("initial", initial, "1 to 6 (fn_rpm > 0, 0 < zeta < 1) pairs"))
    hist = sweep_history(t, s, revs_per_block=revs_per_block, rev_index=rev_index)
    band = tuple(float(b) for b in (band_rpm or _default_band(init, s)))
    ok = np.isfinite(v).all(axis=0) & (s >= band[0]) & (s <= band[1])
    if select is not None:
        ok &= np.asarray(select, dtype=bool)
    idx = np.flatnonzero(ok)
    idx = idx[np.argsort(hist.data_step[idx], kind="stable")]
    K = len(init)
    n_lin = 2 * K + 2 * len(fixed) + {"none": 0, "constant": 2, "linear": 4}[residual]
    if idx.size < max(3 * n_lin, 20):
        raise AnalysisError(invalid_value("band_rpm", band, f"a band holding at least "
                                          f"{max(3 * n_lin, 20)} blocks (got {idx.size})"))
    if idx.size > max_blocks:
        idx = idx[np.linspace(0, idx.size - 1, max_blocks).round().astype(int)]
    data = v[:, idx].T  # (M, P)
    noise0 = _noise_sigma(v[:, idx])
    scale = np.where(np.isfinite(noise0) & (noise0 > 0), noise0,
                     np.maximum(np.sqrt(np.mean(np.abs(data) ** 2, axis=0)), 1e-300) * 1e-3)
    weights = 1.0 / scale
    f_ref = float(np.mean([f for f, _ in init]))
    z_lo = max(min(z for _, z in init) / 3.0, 0.005)
    f_lo = min(f for f, _ in init)
    pre_s = min(PRE_ROLL_DECAYS / (z_lo * 2 * np.pi * f_lo / 60.0), 300.0)
    group = max(1, int(math.ceil(idx.size / max_groups)))
    prob = _Problem(hist, hist.data_step[idx], s[idx], data, weights, residual, conjugate_part,
                    pre_s, f_ref, group, [(float(f), float(z)) for f, z in fixed])
    lo = np.array([v_ for _ in range(K) for v_ in (0.5 * band[0] / f_ref, math.log(ZETA_BOUNDS[0]))])
    hi = np.array([v_ for _ in range(K) for v_ in (2.0 * band[1] / f_ref, math.log(ZETA_BOUNDS[1]))])
    x0 = np.array([v_ for f, z in init for v_ in (f / f_ref, math.log(z))])
    if _weights is not None:
        prob.w = np.asarray(_weights[0], float)
        if _weights[1] is not None and len(_weights[1]) == prob.n_groups:
            prob.rw = np.asarray(_weights[1], float)
    sol = _fit_x(prob, x0, lo, hi, max_nfev=max_nfev)
    _, _, e = prob.solve(sol.x)
    noise = prob.local_noise(e)
    if reweight and _weights is None:
        prob.w, prob.rw = 1.0 / noise[0], 1.0 / noise[1]
        sol = _fit_x(prob, sol.x, lo, hi, max_nfev=max_nfev)
        _, _, e = prob.solve(sol.x)
        noise = prob.local_noise(e)
    fit = _assemble(prob, sol, noise, band)
    if n_boot:
        fit = _bootstrap(prob, sol, fit, lo, hi, noise, band, n_boot, block_revs, seed)
    return fit


def _bootstrap(prob, sol, fit, lo, hi, noise, band, n_boot, block_revs, seed) -> TransientFit:
    rng = np.random.default_rng(seed)
    D, coef, e = prob.solve(sol.x)
    M = prob.n_groups
    model = D @ coef
    mc = model[:M] + 1j * model[M:]
    ec = e[:M] + 1j * e[M:]
    per = max(1, int(round(block_revs / float(np.mean(prob.counts)))))
    J = sol.jac
    n_blk = -(-M // per)
    K = len(fit.modes)
    rec = {"fn": [[] for _ in range(K)], "z": [[] for _ in range(K)],
           "pk": [[] for _ in range(K)], "af": [[] for _ in range(K)]}
    rd = [{"speed": [], "af": []} for _ in fit.readings]
    for _ in range(n_boot):
        w = np.repeat(np.exp(2j * np.pi * rng.random(n_blk)), per)[:M]
        yc = mc + ec * w[:, None]
        Y = np.vstack([yc.real, yc.imag])
        # one Gauss-Newton step from the fitted parameters with the fit's Jacobian: the
        # replicates differ from the data by the noise only, so the step is exact to
        # first order (the full refit of every replicate gave the same spreads within
        # their own scatter at 15 x the cost)
        r = prob.fun(sol.x, Y)
        step, *_ = np.linalg.lstsq(J, -r, rcond=None)
        xb = np.clip(sol.x + step, lo, hi)
        _, cb, _ = prob.solve(xb, Y)
        modes, c0, c1, _ = _modes_from(prob, xb, cb, None)
        for k, m in enumerate(modes):
            rec["fn"][k].append(m.fn_rpm)
            rec["z"][k].append(m.zeta)
            rec["pk"][k].append(m.peak_speed_rpm)
            rec["af"][k].append(m.af)
        if fit.readings:
            tmp = TransientFit(tuple(modes), c0, c1, prob.s_ref, band, M, fit.rms, fit.noise,
                               0, 0, True, "")
            got = _readings(tmp.modes, tmp.steady, band, n_grid=2001)
            for j, r in enumerate(fit.readings):
                cand = [g for g in got if g.probe == r.probe
                        and abs(g.speed_rpm - r.speed_rpm) <= 0.03 * r.speed_rpm]
                if cand:
                    g = min(cand, key=lambda g: abs(g.speed_rpm - r.speed_rpm))
                    rd[j]["speed"].append(g.speed_rpm)
                    rd[j]["af"].append(g.af if r.af is not None else None)
    modes = tuple(_replace(m, fn_std_rpm=_std(rec["fn"][k]), zeta_std=_std(rec["z"][k]),
                           peak_speed_std_rpm=_std(rec["pk"][k]), af_std=_std(rec["af"][k]))
                  for k, m in enumerate(fit.modes))
    readings = tuple(_replace(r, speed_std_rpm=_std(rd[j]["speed"]),
                              af_std=_std(rd[j]["af"]) if r.af is not None else None)
                     for j, r in enumerate(fit.readings))
    return _replace(fit, modes=modes, readings=readings, n_boot=int(n_boot))


# --------------------------------------------------------------------------- one run
@dataclass(frozen=True)
class DirectionFit:
    """The run's modes refitted to one run direction only (no bootstrap)."""

    direction: str
    fn_rpm: tuple[float, ...]
    zeta: tuple[float, ...]
    fn_std_rpm: tuple[float | None, ...]
    n_blocks: int


@dataclass(frozen=True)
class Cluster:
    """The modes of one speed band of the run's modal model.

    Attributes
    ----------
    band_rpm : (float, float)
        The band of this cluster (its modes' readings are taken there).
    mode_index : tuple of int
        Indices into :attr:`RunModes.fit` ``.modes`` of the modes in this band.
    candidates_rpm : tuple of float
        The quasi-steady readings that seeded it.
    tried : tuple of str
        One sentence per model order tried (misfit in the band, F statistic, decision).
    unresolved_split : bool
        One more mode fitted significantly better in this band but could not be resolved
        (modes too close or too poorly determined): a split critical is likely here but not
        separable from these data.
    conservative_af : float or None
        With an unresolved split: the largest AF among the candidate modes.
    good : bool
        Whether the sweep-free readings of this band may govern (see :func:`identify_modes`).
    notes : tuple of str
        Why not good, the unresolved split, the run-direction agreement.
    agreement : str
        ``'agree'``, ``'differ'`` or ``''`` (fewer than two run directions).
    """

    band_rpm: tuple[float, float]
    mode_index: tuple[int, ...]
    candidates_rpm: tuple[float, ...]
    tried: tuple[str, ...]
    unresolved_split: bool
    conservative_af: float | None
    good: bool
    notes: tuple[str, ...]
    agreement: str = ""


@dataclass(frozen=True)
class RunModes:
    """The run's modal model: one set of modes shared by every probe and run direction.

    ``fit`` is the joint fit (None when nothing could be fitted), ``clusters`` its speed
    bands, ``directions`` the modes refitted to each run direction alone.
    """

    fit: TransientFit | None
    clusters: tuple[Cluster, ...]
    directions: tuple[DirectionFit, ...]
    n_probes: int
    method: str = ""

    @property
    def modes(self) -> tuple[TransientMode, ...]:
        return self.fit.modes if self.fit is not None else ()

    def cluster_of(self, speed_rpm: float) -> Cluster | None:
        """The cluster whose band holds ``speed_rpm`` (None outside every band)."""
        for c in self.clusters:
            if c.band_rpm[0] <= speed_rpm <= c.band_rpm[1]:
                return c
        return None

    def readings(self, probe: int) -> list[ProbeReading]:
        """Sweep-free readings of one probe, by speed."""
        if self.fit is None:
            return []
        return sorted((r for r in self.fit.readings if r.probe == probe), key=lambda r: r.speed_rpm)


METHOD = ("transient modal identification: single-degree-of-freedom unbalance modes shared "
          "by every probe, integrated through the run's measured speed-time history "
          "(exact per block of whole revolutions) and fitted by variable projection; the "
          "steady-state critical is the peak of the fitted model's steady response and its "
          "AF the API 684 half-power AF of that response (F. M. Lewis 1932 for the sweep "
          "shift the fit removes)")


def _distinct(cands: list[tuple[float, float]], tol: float = 0.02):
    out: list[list[tuple[float, float]]] = []
    for c in sorted(cands):
        if out and c[0] <= out[-1][0][0] * (1 + tol):
            out[-1].append(c)
        else:
            out.append([c])
    return [(float(np.median([f for f, _ in g])), float(np.median([z for _, z in g]))) for g in out]


def _clusters(distinct, gap_ratio: float):
    groups: list[list[tuple[float, float]]] = []
    for c in distinct:
        if groups and c[0] <= groups[-1][-1][0] * gap_ratio:
            groups[-1].append(c)
        else:
            groups.append([c])
    return groups


def _modes_in(fit: TransientFit, band) -> list[TransientMode]:
    return [m for m in fit.modes if band[0] <= m.fn_rpm <= band[1]]


def _guards(fit: TransientFit, band, n_expected: int) -> str:
    """Why the modes of ``band`` in a model are not acceptable ('' when they are)."""
    ms = _modes_in(fit, band)
    if len(ms) != n_expected:
        out = [m for m in fit.modes if not band[0] <= m.fn_rpm <= band[1]]
        far = min(out, key=lambda m: min(abs(m.fn_rpm - band[0]), abs(m.fn_rpm - band[1]))) if out else None
        return (f"a mode ran out of the band (to {far.fn_rpm:.0f} rpm)" if far is not None
                else "a mode ran out of the band")
    for m in ms:
        if m.zeta <= ZETA_BOUNDS[0] * 1.25 or m.zeta >= ZETA_BOUNDS[1] * 0.95:
            return f"a damping ratio ran to its bound ({m.zeta:.3g})"
        if m.fn_std_fit_rpm is None or not math.isfinite(m.fn_std_fit_rpm):
            return f"the mode at {m.fn_rpm:.0f} rpm is not determined (singular fit)"
    for a, b in zip(ms[:-1], ms[1:]):
        sig = math.hypot(a.fn_std_fit_rpm, b.fn_std_fit_rpm)
        gap = b.fn_rpm - a.fn_rpm
        if not (gap > 3.0 * sig and gap > 0.002 * a.fn_rpm):
            return (f"modes at {a.fn_rpm:.0f} and {b.fn_rpm:.0f} rpm are not separated "
                    f"(gap {gap:.0f} rpm, uncertainty {sig:.0f} rpm)")
    top = np.max(np.abs(fit.steady(np.linspace(band[0], band[1], 801))), axis=1)
    for m in ms:
        xp = 1.0 / (2.0 * m.zeta * math.sqrt(max(1.0 - m.zeta ** 2, 1e-12)))
        share = float(np.max(np.abs(np.asarray(m.participation)) * xp / np.maximum(top, 1e-300)))
        if share < 0.05:
            return f"the mode at {m.fn_rpm:.0f} rpm carries only {100 * share:.0f} % of the response"
    return ""


def _best(args, kw, inits, weights, max_nfev=40):
    best = None
    for init in inits:
        try:
            f = fit_transient(*args, initial=sorted(init), _weights=weights, max_nfev=max_nfev, **kw)
        except (AnalysisError, np.linalg.LinAlgError, ValueError):
            continue
        if best is None or f.rss_weighted < best.rss_weighted:
            best = f
    return best


def identify_modes(time_s, speed_rpm, vectors, *, candidates: Sequence[tuple[float, float | None]],
                   revs_per_block: int = 1, rev_index=None, masks: dict | None = None,
                   n_boot: int = 30, seed: int = 0, max_modes: int = 3,
                   gap_ratio: float = 1.25, conjugate_part: bool = True,
                   residual: str = "linear") -> RunModes:
    """One modal model for a run: every probe, every run direction, one set of modes.

    Steps: (1) the quasi-steady readings in ``candidates`` (e.g. every probe's critical
    speeds from :func:`rundash.analysis.criticals.find_criticals`) are merged within 2 %
    and grouped into clusters (a speed ratio above ``gap_ratio`` between neighbours starts
    a new one); each cluster's band is ``[lowest (1 - w), highest (1 + w)]``,
    ``w = 5 zeta + 0.08`` clipped to 0.12-0.6, cut at the geometric middle to a
    neighbouring cluster; (2) each cluster gets one mode from a fit in its own band, then
    all clusters' modes are fitted jointly over the union of the bands
    (:func:`fit_transient`: every probe at once); (3) cluster by cluster, in its band with
    the other clusters' modes held, a model with one more mode (several starts: the
    candidates and pairs around the existing mode) replaces it when it lowers the weighted
    misfit by more
    than ``ln(n)`` per added parameter in units of the residual variance (an F test at the
    Schwarz/BIC threshold) and by at least ``MIN_GAIN`` (10 %), and its modes are
    acceptable: inside the band, damping not at a bound, separated by more than three
    sigma and 0.2 %, each carrying at least 5 % of the response; when the misfit test
    passes but the modes are not acceptable, the cluster keeps fewer modes and reports an
    *unresolved split* with the largest AF among the candidate modes (the conservative
    reading); (4) the chosen model is refitted with a bootstrap and to each run direction.

    A cluster is *good* (its sweep-free readings may govern) when the optimiser converged,
    the misfit in its band is at most twice the noise and the relative misfit of the fit at
    most 0.2, each of its modes has a bootstrap sigma of at most 1 % of its frequency and
    30 % of its damping ratio, the data cover each mode's peak +- max(zeta, 0.03) fn, and,
    with both run directions, their natural frequencies agree within 1 % or three sigma.

    Parameters
    ----------
    time_s, speed_rpm : array_like, shape (n,)
        Block times and speeds of the whole run (every segment).
    vectors : array_like of complex, shape (P, n)
        1X phasors of every probe (slow-roll compensated where that applies).
    candidates : sequence of (speed_rpm, zeta or None)
        Quasi-steady readings; zeta None means 0.05.
    revs_per_block, rev_index :
        As :func:`sweep_history`.
    masks : dict of str to bool array, optional
        Blocks of each run direction (``'run-up'``, ``'coast-down'``) for the direction
        refits; the joint fit uses every block in the bands.
    n_boot, seed :
        Bootstrap replicates and seed for the chosen model.
    max_modes : int
        Largest number of modes per cluster.

    Returns
    -------
    RunModes
    """
    t = np.asarray(time_s, dtype=float)
    s = np.asarray(speed_rpm, dtype=float)
    v = np.asarray(vectors, dtype=complex)
    if v.ndim == 1:
        v = v[None, :]
    if v.ndim != 2 or v.shape[1] != t.size or s.shape != t.shape:
        raise AnalysisError(invalid_value("vectors", f"shape {v.shape}", f"(P, {t.size})"))
    if not (isinstance(max_modes, (int, np.integer)) and 1 <= max_modes <= 4):
        raise AnalysisError(invalid_value("max_modes", max_modes, "an integer from 1 to 4"))
    s_lo, s_hi = float(np.min(s)), float(np.max(s))
    cands = []
    for c in candidates:
        f, z = float(c[0]), c[1]
        z = 0.05 if z is None or not math.isfinite(z) else float(np.clip(z, 0.01, 0.5))
        if math.isfinite(f) and s_lo < f < s_hi:
            cands.append((f, z))
    groups = _clusters(_distinct(cands), gap_ratio)
    args = (t, s, v)
    base = dict(revs_per_block=revs_per_block, rev_index=rev_index, conjugate_part=conjugate_part,
                residual=residual)
    bands = []
    for gi, g in enumerate(groups):
        w = float(np.clip(5.0 * max(z for _, z in g) + 0.08, 0.12, 0.6))
        lo, hi = g[0][0] * (1 - w), g[-1][0] * (1 + w)
        if gi > 0:
            lo = max(lo, math.sqrt(groups[gi - 1][-1][0] * g[0][0]))
        if gi + 1 < len(groups):
            hi = min(hi, math.sqrt(g[-1][0] * groups[gi + 1][0][0]))
        bands.append((max(lo, s_lo), min(hi, s_hi)))
    # (2) one mode per cluster from its own band, then jointly
    starts, keep = [], []
    for g, band in zip(groups, bands):
        if band[1] <= band[0]:
            continue
        f1 = _best(args, dict(base, band_rpm=band), [[c] for c in g], None, max_nfev=60)
        if f1 is not None and band[0] <= f1.modes[0].fn_rpm <= band[1]:
            starts.append((f1.modes[0].fn_rpm, f1.modes[0].zeta))
            keep.append((g, band))
    if not keep:
        return RunModes(None, (), (), int(v.shape[0]), METHOD)
    union = (min(b[0] for _, b in keep), max(b[1] for _, b in keep))
    kw = dict(base, band_rpm=union, max_groups=500 * len(keep) + 300)
    try:
        cur = fit_transient(*args, initial=starts, **kw)
    except (AnalysisError, np.linalg.LinAlgError, ValueError):
        return RunModes(None, (), (), int(v.shape[0]), METHOD)
    weights = cur.weights
    cur = _best(args, kw, [[(m.fn_rpm, m.zeta) for m in cur.modes]], weights, max_nfev=None) or cur
    # (3) model order, cluster by cluster: fits in the cluster's band with the other
    # clusters' modes held (their tails are not linear in speed)
    info = []
    final_modes: list[tuple[float, float]] = []
    for g, band in keep:
        tried, unresolved, cons_af, why_unres = [], False, None, ""
        inside = [(m.fn_rpm, m.zeta) for m in _modes_in(cur, band)]
        others = [(m.fn_rpm, m.zeta) for m in cur.modes if not band[0] <= m.fn_rpm <= band[1]]
        kwl = dict(base, band_rpm=band, fixed=others)
        wl = (cur.weights[0], None)
        curl = _best(args, kwl, [inside], wl, max_nfev=60) if inside else None
        if curl is None:
            info.append((g, band, ("no mode could be fitted in the band",), False, None, ""))
            continue
        n_in = len(curl.modes)
        tried.append(f"{n_in} mode{'s' if n_in != 1 else ''}: misfit in the band "
                     f"{curl.misfit_ratio:.2f} x the noise")
        while n_in < max_modes:
            if curl.misfit_ratio < math.sqrt(1.0 / (1.0 - MIN_GAIN)) * 0.995:
                tried.append(f"{n_in + 1} modes not tried: the misfit is within "
                             f"{100 * (curl.misfit_ratio - 1):+.1f} % of the noise")
                break
            nxt = _best(args, kwl, _more_inits(g, [(m.fn_rpm, m.zeta) for m in curl.modes]), wl)
            if nxt is None:
                break
            r0, r1 = curl.rss_weighted, nxt.rss_weighted
            dp = nxt.n_par - curl.n_par
            s2 = r1 / max(nxt.n_obs - nxt.n_par, 1)
            F = (r0 - r1) / max(dp, 1) / max(s2, 1e-300)
            thr = math.log(max(nxt.n_obs, 3))
            gain = (r0 - r1) / max(r0, 1e-300)
            # the F test alone takes small systematic misfits (the sampled speed history,
            # a real rotor's departures from modal form) for modes; a real extra mode
            # removed 98-99.9 % of the misfit in the tests, a spurious one 0.1-3 %
            passes = F > thr and gain >= MIN_GAIN
            why = _guards(nxt, band, n_in + 1) if passes else ""
            got = ", ".join(f"{m.fn_rpm:.0f}" for m in nxt.modes)
            tried.append(f"{n_in + 1} modes ({got} rpm): misfit {100 * gain:.1f} % lower, "
                         f"F {F:.3g} against {thr:.3g}"
                         + ("; taken" if passes and not why else
                            (f"; not taken: {why}" if why else "; not taken: no significant gain")))
            if not passes:
                break
            if why:
                unresolved, why_unres = True, why
                afs = [m.af for m in (*_modes_in(nxt, band), *curl.modes)
                       if m.af is not None and m.zeta < ZETA_BOUNDS[1] * 0.95]
                cons_af = max(afs) if afs else None
                break
            curl, n_in = nxt, n_in + 1
        final_modes += [(m.fn_rpm, m.zeta) for m in curl.modes]
        info.append((g, band, tuple(tried), unresolved, cons_af, why_unres))
    # (4) final joint fit with bootstrap, and each run direction alone
    init = final_modes or [(m.fn_rpm, m.zeta) for m in cur.modes]
    try:
        fin = fit_transient(*args, initial=init, n_boot=n_boot, seed=seed, **kw)
    except (AnalysisError, np.linalg.LinAlgError, ValueError):
        fin = cur
    fin = _replace(fin, readings=tuple(r for r in fin.readings
                                       if any(b[0] <= r.speed_rpm <= b[1] for _, b in keep)))
    dirs = []
    w_fin = (fin.weights[0], None)
    for name, mk in (masks or {}).items():
        mk = np.asarray(mk, dtype=bool)
        sel = mk & (s >= union[0]) & (s <= union[1])
        if np.count_nonzero(sel) < 30:
            continue
        try:
            fd = fit_transient(*args, initial=init, select=mk, reweight=False, _weights=w_fin, **kw)
        except (AnalysisError, np.linalg.LinAlgError, ValueError):
            continue
        if len(fd.modes) == len(fin.modes):
            dirs.append((DirectionFit(name, tuple(m.fn_rpm for m in fd.modes),
                                      tuple(m.zeta for m in fd.modes),
                                      tuple(m.fn_std_fit_rpm for m in fd.modes), fd.n_blocks),
                         s[sel]))
    clusters = tuple(_judge(fin, g, band, tried, unresolved, cons_af, why_unres, s, dirs)
                     for g, band, tried, unresolved, cons_af, why_unres in info)
    return RunModes(fin, clusters, tuple(d for d, _ in dirs), int(v.shape[0]), METHOD)


def _band_ratio(fit: TransientFit, band) -> float:
    """Misfit in a band over the noise from second differences (1: only noise is left)."""
    return fit.misfit_ratio_in(band)


def _more_inits(g, inside):
    """Starting sets with one more mode than ``inside`` in a cluster seeded by ``g``."""
    out = []
    if len(inside) == 1:
        fn, z = inside[0]
        if len(g) >= 2:
            out.append([g[0], g[-1]])
            out += [[a, b] for a, b in zip(g[:-1], g[1:])][:2]
        for d in (0.7 * z, 2.0 * z):
            d = max(d, 0.005)
            out.append([(fn * (1 - d), z), (fn * (1 + d), z)])
    else:
        K = len(inside)
        if len(g) >= K + 1:
            idx = np.linspace(0, len(g) - 1, K + 1).round().astype(int)
            out.append([g[i] for i in idx])
        for c in g:
            if all(abs(c[0] - f) > 0.02 * f for f, _ in inside):
                out.append(inside + [c])
    return out


def _covers(speed: np.ndarray, modes) -> bool:
    for m in modes:
        pk = m.peak_speed_rpm or m.fn_rpm
        d = max(m.zeta, 0.03) * m.fn_rpm
        if speed.size == 0 or not (np.min(speed) <= pk - d and np.max(speed) >= pk + d):
            return False
    return True


def _judge(fit, g, band, tried, unresolved, cons_af, why_unres, speed, dirs) -> Cluster:
    idx = tuple(i for i, m in enumerate(fit.modes) if band[0] <= m.fn_rpm <= band[1])
    ms = [fit.modes[i] for i in idx]
    notes = []
    if not fit.success:
        notes.append(f"the optimiser did not converge ({fit.message})")
    ratio = _band_ratio(fit, band)
    if not ratio <= 2.0:
        notes.append(f"the model leaves {ratio:.1f} x the noise unexplained in the band")
    if not fit.relative_error <= 0.2:
        notes.append(f"relative misfit {100 * fit.relative_error:.0f} % (at most 20 %)")
    if not ms:
        notes.append("no mode of the fitted model lies in the band")
    for m in ms:
        if m.fn_std_rpm is not None and m.fn_std_rpm > 0.01 * m.fn_rpm:
            notes.append(f"mode at {m.fn_rpm:.0f} rpm: frequency uncertain (+-{m.fn_std_rpm:.0f} rpm)")
        if m.zeta_std is not None and m.zeta_std > 0.3 * m.zeta:
            notes.append(f"mode at {m.fn_rpm:.0f} rpm: damping uncertain (zeta {m.zeta:.3f} "
                         f"+-{m.zeta_std:.3f})")
    in_band = speed[(speed >= band[0]) & (speed <= band[1])]
    if ms and not _covers(in_band, ms):
        notes.append("the data do not cover each mode's peak on both sides")
    agreement = ""
    both = [(d, sp) for d, sp in dirs if _covers(sp[(sp >= band[0]) & (sp <= band[1])], ms)]
    if len(both) >= 2 and ms:
        (a, _), (b, _) = both[0], both[1]
        ok, txt = True, []
        for k in idx:
            d = abs(a.fn_rpm[k] - b.fn_rpm[k])
            sig = math.hypot(a.fn_std_rpm[k] or 0.0, b.fn_std_rpm[k] or 0.0)
            ok &= d <= max(0.01 * a.fn_rpm[k], 3.0 * sig)
            txt.append(f"{a.fn_rpm[k]:.0f} vs {b.fn_rpm[k]:.0f} rpm")
        agreement = "agree" if ok else "differ"
        notes.append(f"{a.direction} and {b.direction} fitted alone: {'; '.join(txt)} ({agreement})")
        if not ok:
            notes.append("the run directions disagree beyond 1 % and three sigma")
    if unresolved:
        notes.append(f"unresolved split: one more mode fits significantly better but {why_unres}"
                     + (f"; the conservative AF {cons_af:.2f} is the largest of the candidate "
                        f"modes" if cons_af is not None else ""))
    bad = [n for n in notes if not (n.startswith("unresolved split") or " fitted alone: " in n)]
    return Cluster(band, idx, tuple(f for f, _ in g), tried, unresolved, cons_af, not bad,
                   tuple(notes), agreement)
