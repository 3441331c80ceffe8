"""The model of transient modal identification: unbalance-driven modes along a sweep.

The oscillator, the run's speed-time history as integration steps, the exact-in-time
1X response of one mode as computed order tracking reads it (:func:`mode_response`), and
the fitted model's result types (:class:`TransientFit` and its modes and readings). The
fit itself is :mod:`rundash.analysis.transient_fit`, the run-level driver
:mod:`rundash.analysis.transient`.

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


References
----------
F. M. Lewis, "Vibration during acceleration through a critical speed", Trans. ASME 54
(1932) 253-261 (the sweep shift).
W. T. Thomson and M. D. Dahleh, "Theory of Vibration with Applications", 5th ed., Prentice
Hall, 1998, sec. 3.3 (rotating unbalance).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from rundash.analysis.amplification import unbalance_response
from rundash.errors import AnalysisError, invalid_value

__all__ = [
    "SweepHistory", "sweep_history", "windowed_history", "mode_response", "mode_means",
    "mode_means_derivatives", "integration_intervals",
    "unbalance_peak_ratio", "unbalance_half_power_af", "TransientMode", "ProbeReading",
    "TransientFit", "PRE_ROLL_DECAYS",
]

#: Decay times integrated before the first fitted block (steady start, error e^-10).
PRE_ROLL_DECAYS = 10.0
_CHUNK_DECAY = 500.0  # e-folds per cumulative-sum chunk (e^500 x |g| stays below 1e300)
_PIECE_STEPS = 8192  # steps the mode means pass through at once (see _pieces)
_KEEP_STEPS = 16384  # steps whose pass mode_means keeps for its derivatives


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


def _revs_per_block(revs_per_block) -> int:
    if isinstance(revs_per_block, bool) or int(revs_per_block) != revs_per_block or revs_per_block < 1:
        raise AnalysisError(invalid_value("revs_per_block", revs_per_block, "an integer >= 1"))
    return int(revs_per_block)


def _checked_blocks(time_s, speed_rpm, revs_per_block, rev_index):
    """The blocks of :func:`sweep_history` in time order, checked (its errors), with their
    durations, start and end times, time gaps and untracked revolutions between them."""
    t = np.asarray(time_s, dtype=float)
    s = np.asarray(speed_rpm, dtype=float)
    if t.ndim != 1 or t.size < 2 or s.shape != t.shape:
        raise AnalysisError(invalid_value("time_s/speed_rpm", f"shapes {t.shape}, {s.shape}",
                                          "two 1-D arrays of equal length >= 2"))
    if not (np.all(np.isfinite(t)) and np.all(np.isfinite(s)) and np.all(s > 0)):
        raise AnalysisError(invalid_value("speed_rpm", "non-finite or non-positive values",
                                          "finite positive block speeds"))
    R = _revs_per_block(revs_per_block)
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
    return R, order, ts, ss, h, ta, tb, gap_t, gap_revs


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
    R, order, ts, ss, h, ta, tb, gap_t, gap_revs = _checked_blocks(
        time_s, speed_rpm, revs_per_block, rev_index)
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


def windowed_history(time_s, speed_rpm, first: int, last: int, pre_s: float, *,
                     revs_per_block: int = 1, rev_index=None,
                     margin: int = 4) -> tuple[int, SweepHistory]:
    """The sweep history of only the blocks an integration of blocks ``first`` to ``last``
    (with a pre-roll of ``pre_s`` before ``first``) needs: ``(i0, history)``, the history
    of blocks ``i0`` onwards (its ``data_step[k]`` is block ``i0 + k``'s step).

    The history is local: a block's steps, speed and gap fill depend on its own block and
    its neighbours (the gradients of speed), so the blocks from ``margin`` before the first
    whose start lies within ``pre_s`` of ``first``'s start to ``margin`` after ``last`` give
    the steps of the pre-roll and of the blocks ``first`` to ``last`` the same values as the
    whole run's history: an integration over them has the same result whatever the run's
    length, and holds only them. The blocks of the window are checked as
    :func:`sweep_history` checks them (its errors), and only they: the blocks before the
    pre-roll and after ``last`` take no part. Blocks not in ascending time order give the
    whole run's history."""
    t = np.asarray(time_s, dtype=float)
    n = t.size
    if n < 2 or not bool(np.all(t[1:] > t[:-1])):
        return 0, sweep_history(time_s, speed_rpm, revs_per_block=revs_per_block,
                                rev_index=rev_index)
    first, last = int(first), int(last)
    s = np.asarray(speed_rpm, dtype=float)
    # the first block whose start lies within pre_s of block first's start: block starts
    # (t - 30 R / s, ascending for blocks that do not overlap) are computed from the
    # first block whose centre time reaches that start, since a block starts before its
    # centre (the same values as the whole run's, found among the pre-roll's blocks only)
    R = _revs_per_block(revs_per_block)
    target = (t[first] - 0.5 * (60.0 * R / s[first])) - pre_s
    k0 = int(np.searchsorted(t, target, side="left"))
    ts = t[k0:first + 1]
    ta = ts - 0.5 * (60.0 * R / s[k0:first + 1])
    j = k0 + int(np.searchsorted(ta, target, side="left"))
    i0, i1 = max(j - margin, 0), min(last + 1 + margin, n)
    ri = None if rev_index is None else np.asarray(rev_index)[i0:i1]
    return i0, sweep_history(t[i0:i1], s[i0:i1], revs_per_block=revs_per_block, rev_index=ri)


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


def _conjugate_pair(z: np.ndarray) -> bool:
    """Whether the two rows of ``z`` are complex conjugates (an underdamped mode's poles)."""
    return z.shape[0] == 2 and bool(np.array_equal(z[1], np.conj(z[0])))


def _exp_rows(z: np.ndarray, pair: bool) -> np.ndarray:
    """``np.exp(z)``; of a conjugate pair of rows only the first is computed (the
    exponential of a conjugate is the conjugate of the exponential)."""
    if not pair:
        return np.exp(z)
    out = np.empty_like(z)
    np.exp(z[0], out=out[0])
    np.conjugate(out[0], out=out[1])
    return out


def _recursion(lamh: np.ndarray, g: np.ndarray, u0: np.ndarray, chunks: list | None = None) -> np.ndarray:
    """``u[:, k+1] = exp(lamh[:, k]) u[:, k] + g[:, k]``, ``u[:, 0] = u0``, rows at once.

    Chunked cumulative sums: inside a chunk ``u_k = e^{L_k} (u_s + sum_j g_j e^{-L_{j+1}})``
    with ``L`` the cumulative ``lamh`` from the chunk start; a chunk ends before the decay
    reaches ``_CHUNK_DECAY`` e-folds, far from overflow. The rounding error stays at
    ``eps / zeta`` of the response whatever the chunk length (the sum is dominated by its
    latest terms).

    ``chunks``: an empty list receives the chunks and their growth factors ``e^{L_k}``,
    which depend on ``lamh`` only; a filled one (from the same ``lamh``) is used instead of
    computing them again (another ``g`` through the same poles).
    """
    rows, n = g.shape
    u = np.empty((rows, n + 1), np.complex128)
    u[:, 0] = u0
    if not chunks:
        chunks = _chunks(lamh, chunks)
    for s, e, grow in chunks:
        if e == s + 1:
            u[:, e] = grow * u[:, s] + g[:, s]
        else:
            acc = np.cumsum(g[:, s:e] / grow, axis=1)
            u[:, s + 1:e + 1] = grow * (u[:, s:s + 1] + acc)
    return u


def _chunks(lamh: np.ndarray, out: list | None = None) -> list:
    """The chunks ``(s, e, e^{L})`` of :func:`_recursion` (appended to ``out`` if given)."""
    out = [] if out is None else out
    rows, n = lamh.shape
    pair = _conjugate_pair(lamh)
    L = np.empty((rows, n + 1), np.complex128)
    L[:, 0] = 0.0
    if pair:  # the sums of a conjugate row are the conjugates of the sums
        np.cumsum(lamh[0], out=L[0, 1:])
        np.conjugate(L[0], out=L[1])
        decay = -L[0].real  # non-decreasing
    else:
        np.cumsum(lamh, axis=1, out=L[:, 1:])
        decay = np.max(-L.real, axis=0)  # non-decreasing
    s = 0
    while s < n:
        e = int(np.searchsorted(decay, decay[s] + _CHUNK_DECAY, side="right")) - 1
        e = min(max(e, s + 1), n)
        if e == s + 1:
            out.append((s, e, np.exp(lamh[:, s])))
        else:
            loc = L[:, s + 1:e + 1] - L[:, s:s + 1]
            out.append((s, e, _exp_rows(loc, pair)))
        s = e
    return out


def _pole_means(hist: SweepHistory, lo: int, hi: int, lam: np.ndarray, deriv: bool = False,
                state: dict | None = None, u0=None, du0=None):
    """Block means of ``u`` and of ``conj(u) e^{-2i Omega tau}`` for steps lo..hi-1, one
    row per pole in ``lam``, and ``u`` after the last step (to carry into the next steps).

    ``u0``: ``u`` at the start of step lo (default: the steady state of step lo, the
    start of an integration interval).

    With ``deriv``, also their derivatives with respect to the pole: ``d ubar / d lambda``
    and ``dq / d lambda`` where ``cbar = conj(q)`` (``ubar`` and ``q`` are analytic in
    ``lambda``), from the derivative of the recursion,
    ``u'[k+1] = E u'[k] + h E beta + alpha' (1 - E)``, ``alpha' = -alpha / mu``, and
    ``u'`` after the last step (``du0``: at the start, default its steady state).
    Returns ``(ubar, cbar, u_end)`` or ``(ubar, cbar, dubar, dq, u_end, du_end)``.

    ``state``: a dict that keeps the pass's intermediate values (without ``deriv``), or
    that holds them from a pass through the same steps and poles (with ``deriv``: the
    derivatives then take them instead of repeating the pass)."""
    lam = np.asarray(lam, np.complex128)[:, None]
    om = hist.omega[None, lo:hi]
    h = hist.h_s[None, lo:hi]
    kept = (deriv and state is not None and state.get("key") == (lo, hi)
            and np.array_equal(state.get("lam"), lam))
    if kept:
        mu, alpha, lamh, E, beta, chunks, ubar, cbar, u_end = (
            state[k] for k in ("mu", "alpha", "lamh", "E", "beta", "chunks", "ubar", "cbar",
                               "u_end"))
    else:
        F = hist.force[None, lo:hi]
        iom = 1j * om
        mu = lam - iom
        alpha = -F / mu  # steady state of u in each step
        lamh = lam * h
        E = _exp_rows(lamh, _conjugate_pair(lamh))
        chunks = []
        u = _recursion(lamh, alpha * (1.0 - E), alpha[:, 0] if u0 is None else u0, chunks)
        u_end = u[:, -1].copy()
        beta = u[:, :-1] - alpha
        del u
        bm = beta * (E - 1.0)
        ubar = alpha + bm / (mu * h)
        # conj(beta) (conj(E) - 1) / ((conj(lambda) - i Omega) h), as the conjugate (the
        # same rounding: conjugation commutes with complex arithmetic)
        cbar = np.conj(bm / ((lam + iom) * h))
        if state is not None and not deriv:
            state.update(key=(lo, hi), lam=lam, mu=mu, alpha=alpha, lamh=lamh, E=E, beta=beta,
                         chunks=chunks, ubar=ubar, cbar=cbar, u_end=u_end)
    if not deriv:
        return ubar, cbar, u_end
    r = (E - 1.0) / (mu * h)
    nu = lam + 1j * om  # conj(conj(lambda) - i Omega)
    s = (E - 1.0) / (nu * h)
    dalpha = -alpha / mu
    du = _recursion(lamh, h * E * beta + dalpha * (1.0 - E),
                    dalpha[:, 0] if du0 is None else du0, chunks)
    du_end = du[:, -1].copy()
    dbeta = du[:, :-1] - dalpha
    del du
    dubar = dalpha + dbeta * r + beta * (E - r) / mu
    dq = dbeta * s + beta * (E - s) / nu
    return ubar, cbar, dubar, dq, u_end, du_end


def _pieces(intervals):
    """The steps of ``intervals`` in pieces ``(lo, hi, first)`` of at most
    ``_PIECE_STEPS`` steps (``first``: the piece starts its interval). The mode means run
    through one piece at a time with the state carried across, so that what they hold at
    once does not grow with the number of steps (a long slow sweep has 10^5 in a band)."""
    for lo, hi in intervals:
        for s in range(int(lo), int(hi), _PIECE_STEPS):
            yield s, min(s + _PIECE_STEPS, int(hi)), s == lo


class _Out:
    """Where a piece's values go: every step (``at`` None, zero outside the intervals) or
    the steps ``at`` only (ascending)."""

    def __init__(self, n_steps: int, at, count: int):
        self.at = None if at is None else np.asarray(at, dtype=np.int64)
        n = n_steps if self.at is None else self.at.size
        self.arrays = [np.zeros(n, np.complex128) for _ in range(count)]

    def put(self, lo: int, hi: int, values) -> None:
        if self.at is None:
            for arr, v in zip(self.arrays, values):
                arr[lo:hi] = v
            return
        j0, j1 = np.searchsorted(self.at, [lo, hi])
        if j1 > j0:
            sel = self.at[j0:j1] - lo
            for arr, v in zip(self.arrays, values):
                arr[j0:j1] = v[sel]


def _poles(fn_hz: float, zeta: float) -> tuple[complex, complex]:
    w = 2.0 * np.pi * fn_hz
    root = np.sqrt(complex(zeta * zeta - 1.0))
    return w * (-zeta + root), w * (-zeta - root)


def integration_intervals(hist: SweepHistory, steps: np.ndarray, pre_s: float) -> list[tuple[int, int]]:
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


def mode_means(hist: SweepHistory, intervals, fn_hz: float, zeta: float,
               keep: dict | None = None, at=None):
    """``A`` and ``B`` block means of one mode over the steps of ``intervals``.

    ``keep``: a dict that receives the intermediate values of the first ``_KEEP_STEPS``
    steps, for :func:`mode_means_derivatives` at the same ``(fn_hz, zeta)`` (it passes
    through the others again). ``at``: ascending step indices; the means at these steps
    only are returned (default: every step, zero outside ``intervals``)."""
    lp, lm = _poles(fn_hz, zeta)
    lam = np.array([lp, lm])
    d = lp - lm
    out = _Out(hist.n_steps, at, 2)
    budget = _KEEP_STEPS
    u = None
    for lo, hi, first in _pieces(intervals):
        st = None
        if keep is not None and hi - lo <= budget:
            st = keep.setdefault((lo, hi), {})
            budget -= hi - lo
        ub, cb, u = _pole_means(hist, lo, hi, lam, state=st, u0=None if first else u)
        out.put(lo, hi, ((ub[0] - ub[1]) / d, (cb[0] - cb[1]) / np.conj(d)))
    return tuple(out.arrays)


def mode_means_derivatives(hist: SweepHistory, intervals, fn_hz: float, zeta: float,
                           keep: dict | None = None, at=None):
    """:func:`mode_means` and its derivatives with respect to ``fn_hz`` and ``zeta``:
    ``(a, b, da/dfn, db/dfn, da/dzeta, db/dzeta)`` (zero outside ``intervals``; at the
    steps ``at`` only if given).

    From the poles ``lambda = 2 pi fn (-zeta +- sqrt(zeta^2 - 1))``: ``d lambda / d fn =
    lambda / fn``, ``d lambda / d zeta = 2 pi fn (-1 +- zeta / sqrt(zeta^2 - 1))``, and the
    pole means' derivatives (:func:`_pole_means`); ``a = (ubar+ - ubar-) / d`` and
    ``b = conj((q+ - q-) / d)`` with ``d = lambda+ - lambda-``. ``keep``: the dict a
    :func:`mode_means` call at the same ``(fn_hz, zeta)`` filled (the steps it kept are
    not passed through again)."""
    lp, lm = _poles(fn_hz, zeta)
    lam = np.array([lp, lm])
    w = 2.0 * np.pi * fn_hz
    root = np.sqrt(complex(zeta * zeta - 1.0))
    d = lp - lm
    # (d lambda+, d lambda-) per parameter: fn_hz, zeta
    dl = ((lp / fn_hz, lm / fn_hz), (w * (-1.0 + zeta / root), w * (-1.0 - zeta / root)))
    out = _Out(hist.n_steps, at, 6)
    u = du = None
    for lo, hi, first in _pieces(intervals):
        st = None if keep is None else keep.get((lo, hi))
        ub, cb, dub, dq, u, du = _pole_means(hist, lo, hi, lam, deriv=True, state=st,
                                             u0=None if first else u,
                                             du0=None if first else du)
        a = (ub[0] - ub[1]) / d
        b = (cb[0] - cb[1]) / np.conj(d)
        vals = [a, b]
        for dp, dm in dl:
            dd = (dp - dm) / d
            vals.append((dub[0] * dp - dub[1] * dm) / d - a * dd)
            vals.append(np.conj((dq[0] * dp - dq[1] * dm) / d) - b * np.conj(dd))
        out.put(lo, hi, vals)
    return tuple(out.arrays)


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
    >>> bool(abs(c[10000] / unbalance_response(n[10000], 3000.0, 0.05) - 1) < 0.01)
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
    iv = integration_intervals(hist, hist.data_step, pre_roll_s)
    a, b = mode_means(hist, iv, fn_hz, zeta)
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
    group_noise_ratio2: np.ndarray = field(default_factory=lambda: np.empty(0), repr=False)
    weights: tuple = field(default=(None, None), repr=False)  # (per probe, per group) used

    def misfit_ratio_in(self, band) -> float:
        """``misfit_ratio`` over the fitted blocks with speeds inside ``band``."""
        sel = (self.group_speed_rpm >= band[0]) & (self.group_speed_rpm <= band[1])
        return (float(np.sqrt(np.mean(self.group_noise_ratio2[sel]))) if np.any(sel)
                else math.inf)

    @property
    def n_probes(self) -> int:
        return int(self.constant.size)

    def steady(self, speed_rpm) -> np.ndarray:
        """Steady-state complex 1X response of every probe, shape (P, n)."""
        s = np.atleast_1d(np.asarray(speed_rpm, dtype=float))
        x = (s - self.speed_ref_rpm) / self.speed_ref_rpm
        out = self.constant[:, None] + self.slope[:, None] * x[None, :] + 0j
        for m in self.modes:
            out = out + (np.asarray(m.participation)[:, None]
                         * unbalance_response(s, m.fn_rpm, m.zeta)[None, :])
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
