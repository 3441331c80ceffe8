"""The criticals of one curve with bootstrap uncertainties (:func:`estimate_curve`).

Pure numpy/scipy. Input is one probe's per-revolution 1X phasors in one run direction
(see :mod:`rundash.conventions`: ``c = |c| exp(-i lag)``), as
:func:`rundash.analysis.criticals.find_criticals` takes them; the result is what
:func:`rundash.analysis.compare.compare_curves` compares.

Uncertainty: the dependent wild bootstrap
-----------------------------------------
The per-revolution vectors are split into a smooth part (a quadratic Savitzky-Golay fit
in time order over ``smooth_revs`` revolutions) and residuals. Each replicate keeps the
smooth part and multiplies the residuals, in blocks of ``block_revs`` revolutions, by a
random unit phasor, so the replicate keeps the speed of every revolution, the noise
level and its short-range correlation; a random constant offset of the size of the
slow-roll vector's standard error is added too (the compensation subtracted that vector
from every revolution, so its error moves the whole curve). The whole estimator (binning, smoothing, peak,
half-power, phase) is re-run on each replicate; the spread of the replicates is the
uncertainty. It covers the noise in the data, not a bias the estimator shares across
runs (the sweep-rate shift of the apparent peak, F. M. Lewis 1932, is one such bias:
compare like with like).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from typing import Literal, Sequence

import numpy as np
from scipy import signal, sparse

from rundash.analysis.criticals import Critical, find_criticals, replicate_criticals
from rundash.analysis.response_curve import curves_from_sums, speed_bins
from rundash.analysis.vectors import mean_vector_near
from rundash.errors import AnalysisError, invalid_value, require_positive

Direction = Literal["run-up", "coast-down"]
#: Replicate vectors held at once (16 bytes each): the replicates go in chunks of this
#: many values, so a long run's bootstrap needs no more than about 64 MB for them.
_CHUNK_VALUES = 4_000_000


# ----------------------------------------------------------------------------- results
@dataclass(frozen=True)
class CriticalEstimate:
    """One critical of one probe and direction, with bootstrap uncertainties.

    Speeds in rpm, amplitudes in the caller's unit times ``amplitude_factor`` (e.g. um
    p-p). ``*_std`` are one-sigma bootstrap spreads (None when fewer than 5 replicates
    gave the value). ``af`` is the governing AF (``af_method`` says which estimate), and
    ``af_half_power`` the API 684 one (None when not determinable). ``n_found`` counts the
    replicates in which the critical was found again (within the match tolerance),
    ``n_af`` those that gave an AF by the same method; ``n_boot`` the replicates run.
    ``af_fit_std`` is the modal fit's own covariance estimate, kept for reference (it
    treats smoothed, correlated bins as independent and reads low).
    """

    speed_rpm: float
    speed_std_rpm: float | None
    af: float | None
    af_std: float | None
    af_method: str
    af_half_power: float | None
    af_half_power_std: float | None
    af_fit_std: float | None
    peak_amplitude: float | None
    peak_amplitude_std: float | None
    classification: str
    confidence: str
    sweep_rate_rpm_s: float | None
    n_found: int
    n_af: int
    n_boot: int
    critical: Critical

    @property
    def stable(self) -> bool:
        """Found again in at least 90 % of the replicates."""
        return self.n_boot == 0 or self.n_found >= 0.9 * self.n_boot

    @property
    def reproducible(self) -> bool:
        """Found again in at least half the replicates (else most likely a noise bump)."""
        return self.n_boot == 0 or self.n_found >= 0.5 * self.n_boot


@dataclass(frozen=True)
class PhasePoint:
    """Mean 1X vector within +-``width_pct`` of a chosen speed, with bootstrap spreads."""

    speed_rpm: float
    lag_deg: float | None
    lag_std_deg: float | None
    amplitude: float | None
    amplitude_std: float | None
    n_revs: int


@dataclass(frozen=True)
class CurveEstimate:
    """Result of :func:`estimate_curve`: criticals and phase points of one curve."""

    direction: str
    criticals: tuple[CriticalEstimate, ...]
    phase_points: tuple[PhasePoint, ...]
    sweep_rate_rpm_s: float | None
    speed_range_rpm: tuple[float, float]
    n_revs: int
    n_boot: int
    amplitude_factor: float



# ----------------------------------------------------------------------------- helpers
def _residual_model(t: np.ndarray, v: np.ndarray, smooth_revs: int):
    """Smooth part and scaled residuals of per-revolution vectors in time order."""
    n = v.size
    w = min(smooth_revs | 1, n - (1 - n % 2))
    if w < 5:
        return v.copy(), np.zeros_like(v)
    smooth = (signal.savgol_filter(v.real, w, 2, mode="interp")
              + 1j * signal.savgol_filter(v.imag, w, 2, mode="interp"))
    h0 = float(signal.savgol_coeffs(w, 2)[w // 2])  # hat-matrix diagonal at the centre
    return smooth, (v - smooth) / math.sqrt(1.0 - h0)


def _std(values: list[float], min_n: int = 5) -> float | None:
    x = np.asarray([u for u in values if u is not None and math.isfinite(u)], dtype=float)
    if x.size < min_n:
        return None
    return float(np.std(x, ddof=1))


def _circ_std_deg(values: list[float], min_n: int = 5) -> float | None:
    x = np.asarray([u for u in values if u is not None and math.isfinite(u)], dtype=float)
    if x.size < min_n:
        return None
    z = np.exp(1j * np.radians(x))
    ref = np.angle(z.mean())
    dev = np.angle(z * np.exp(-1j * ref))
    return float(np.degrees(np.std(dev, ddof=1)))


def _phase_point(s, v, afac, speed, width_pct):
    m, n = mean_vector_near(s, v, speed, width_pct=width_pct)
    if m is None:
        return None, None, 0
    return float(np.mod(-np.degrees(np.angle(m)), 360.0)), float(afac * abs(m)), n


class _Replicates:
    """The bootstrap's replicates ``smooth + resid * w[block] + offset`` of one curve, read
    without forming them: every bin sum (and the mean near a phase speed) is linear in
    the block phasors ``w`` and the offset, so it is the original sums plus a sparse
    (bins x blocks) product with ``w``. The points are those find_criticals keeps (finite
    and positive speeds); the phase points read all of them, as :func:`_phase_point`."""

    def __init__(self, s, t, smooth, resid, block_revs, n_blocks, speeds, width_pct):
        block = np.arange(s.size) // block_revs
        self._phase = []
        for sp in speeds:
            sel = np.abs(s - sp) <= sp * width_pct / 100.0
            k = int(np.count_nonzero(sel))
            if k == 0:
                self._phase.append(None)
                continue
            at = np.unique(block[sel])  # the blocks with points there, and their sums
            put = np.searchsorted(at, block[sel])
            self._phase.append((k, complex(np.sum(smooth[sel])), at, np.bincount(
                put, resid[sel].real) + 1j * np.bincount(put, resid[sel].imag)))
        pos = s > 0
        self.speed, self.time = s[pos], t[pos]
        if self.speed.size < 20 or np.ptp(self.speed) <= 0:
            self.bins = None  # replicate_criticals finds nothing: nothing to bin
            return
        self.bins = bins = speed_bins(self.speed)
        o = bins.order
        sm, rs, kb, bl = smooth[pos][o], resid[pos][o], bins.index, block[pos][o]
        n_bins = bins.count.size

        def per_bin(x):
            return np.bincount(kb, x.real, minlength=n_bins) + (
                1j * np.bincount(kb, x.imag, minlength=n_bins) if np.iscomplexobj(x) else 0.0)

        self._s0 = per_bin(sm)
        self._p0 = per_bin(np.abs(sm) ** 2 + np.abs(rs) ** 2)
        shape = (n_bins, n_blocks)
        self._b = sparse.csr_matrix((rs, (kb, bl)), shape=shape)
        self._c = sparse.csr_matrix((np.conj(sm) * rs, (kb, bl)), shape=shape)

    def curves(self, w, off, afac):
        """The prepared curves of the replicates with block phasors ``w`` (blocks x
        replicates) and offsets ``off`` (replicates)."""
        if self.bins is None:
            return []
        count = self.bins.count
        bw, cw = (self._b @ w).T, (self._c @ w).T
        o = off[:, None]
        sums = self._s0 + bw + count * o
        power = (self._p0 + 2.0 * np.real(np.conj(o) * (self._s0 + bw)) + count * np.abs(o) ** 2
                 + 2.0 * cw.real)
        return curves_from_sums(self.bins, sums, power, afac, None)

    def phase_point(self, j, w, off, afac):
        """(lag, amplitude) of each replicate's mean vector near the j-th phase speed."""
        got = self._phase[j]
        if got is None:
            return [(None, None)] * w.shape[1]
        k, s0, at, a = got
        m = (s0 + a @ w[at] + k * off) / k
        return [(float(np.mod(-np.degrees(np.angle(x)), 360.0)), float(afac * abs(x))) for x in m]


def _nearest(crits, speed, tol_pct):
    best, best_d = None, None
    for c in crits:
        d = abs(c.speed_rpm - speed) / speed * 100.0
        if d <= tol_pct and (best_d is None or d < best_d):
            best, best_d = c, d
    return best


# ----------------------------------------------------------------------------- estimate
def estimate_curve(speed_rpm, vector, *, time_s=None, amplitude_factor: float = 2.0,
                   direction: Direction = "run-up", phase_speeds_rpm: Sequence[float] = (),
                   phase_width_pct: float = 0.5, n_boot: int = 100, block_revs: int = 4,
                   smooth_revs: int = 21, match_tolerance_pct: float = 3.0,
                   offset_std: float = 0.0, seed: int = 0) -> CurveEstimate:
    """Critical speeds of one probe and direction, each with bootstrap uncertainties.

    The criticals are those of :func:`rundash.analysis.criticals.find_criticals` with
    its defaults (the same the run's findings use). The uncertainty of each critical's
    speed, AF and peak amplitude, and of the lag and amplitude at ``phase_speeds_rpm``,
    is the spread over ``n_boot`` replicates of the dependent wild bootstrap described
    in the module docstring.

    Parameters
    ----------
    speed_rpm : array_like, shape (n,)
        Shaft speed of each revolution (or block) in rpm, in time order.
    vector : array_like of complex, shape (n,)
        Slow-roll-compensated 1X phasors (|c| peak units; see :mod:`rundash.conventions`).
    time_s : array_like, shape (n,), optional
        Time of each point in s (for the sweep rate); default: the index order.
    amplitude_factor : float
        Reported amplitude = factor x |c| (2.0 for p-p, 1.0 for peak).
    direction : {'run-up', 'coast-down'}
    phase_speeds_rpm : sequence of float
        Speeds at which the mean lag and amplitude within +-``phase_width_pct`` % are
        read (e.g. the top speed, or a speed below the first critical).
    n_boot : int
        Bootstrap replicates (0: no uncertainties). 100 gives the one-sigma spread to
        about 7 % (relative standard error 1/sqrt(2 (n - 1))).
    block_revs : int
        Revolutions sharing one random phasor (keeps short-range correlation).
    smooth_revs : int
        Window of the smooth part, in revolutions (odd; quadratic Savitzky-Golay).
    match_tolerance_pct : float
        A replicate's critical within this percentage of the original speed is the same
        critical found again.
    offset_std : float
        One-sigma uncertainty (per component, |c| units) of a constant vector that was
        subtracted from every revolution: the standard error of the slow-roll vector
        (:func:`vector_mean`). Each replicate adds a random offset of that size. An
        error in the slow-roll vector moves the whole compensated curve and with it the
        peak, the AF and the phase; leaving it out makes the uncertainty read low.
    seed : int
        Seed of the random generator (results are reproducible).

    Returns
    -------
    CurveEstimate

    References
    ----------
    C. F. J. Wu, "Jackknife, bootstrap and other resampling methods in regression
    analysis", Annals of Statistics 14 (1986) 1261-1295 (wild bootstrap). X. Shao, "The
    dependent wild bootstrap", J. American Statistical Association 105 (2010) 218-235.
    B. Efron, R. J. Tibshirani, "An Introduction to the Bootstrap", Chapman & Hall,
    1993 (standard errors by resampling).

    Examples
    --------
    >>> import numpy as np
    >>> from rundash.analysis.amplification import unbalance_response
    >>> rng = np.random.default_rng(0)
    >>> n = np.linspace(300, 6000, 3000)
    >>> noise = 0.05 * (rng.standard_normal(3000) + 1j * rng.standard_normal(3000))
    >>> est = estimate_curve(n, 5 * unbalance_response(n, 3000, 0.05) + noise, n_boot=20)
    >>> ce, = est.criticals
    >>> round(ce.speed_rpm, -1), ce.speed_std_rpm < 5, ce.n_found
    (3010.0, True, 20)
    """
    s = np.asarray(speed_rpm, dtype=float)
    v = np.asarray(vector, dtype=complex)
    if s.ndim != 1 or s.size < 20:
        raise AnalysisError(invalid_value("speed_rpm", f"shape {s.shape}",
                                          "a 1-D array of at least 20 speeds"))
    if v.shape != s.shape:
        raise AnalysisError(invalid_value("vector", f"shape {v.shape}",
                                          f"the shape of speed_rpm {s.shape}"))
    t = np.arange(s.size, dtype=float) if time_s is None else np.asarray(time_s, dtype=float)
    if t.shape != s.shape:
        raise AnalysisError(invalid_value("time_s", f"shape {t.shape}",
                                          f"the shape of speed_rpm {s.shape}"))
    if not (isinstance(n_boot, (int, np.integer)) and n_boot >= 0):
        raise AnalysisError(invalid_value("n_boot", n_boot, "an integer >= 0"))
    if not (isinstance(block_revs, (int, np.integer)) and block_revs >= 1):
        raise AnalysisError(invalid_value("block_revs", block_revs, "an integer >= 1"))
    if not (isinstance(smooth_revs, (int, np.integer)) and smooth_revs >= 5):
        raise AnalysisError(invalid_value("smooth_revs", smooth_revs, "an integer >= 5"))
    require_positive("match_tolerance_pct", match_tolerance_pct, "a positive percentage")
    require_positive("phase_width_pct", phase_width_pct, "a positive percentage")
    if not (math.isfinite(offset_std) and offset_std >= 0):
        raise AnalysisError(invalid_value("offset_std", offset_std, "a standard error >= 0"))
    good = np.isfinite(s) & np.isfinite(t) & np.isfinite(v.real) & np.isfinite(v.imag)
    order = np.argsort(t[good], kind="stable")
    s, v, t = s[good][order], v[good][order], t[good][order]
    afac = float(amplitude_factor)
    kw = dict(time_s=t, amplitude_factor=afac, direction=direction)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        crits = find_criticals(s, v, **kw)
    use_fit = any(c.af_method not in ("half-power",) for c in crits)
    speeds = [float(x) for x in phase_speeds_rpm]

    rep = {i: {"speed": [], "af": [], "hp": [], "peak": []} for i in range(len(crits))}
    rep_phase = {j: {"lag": [], "amp": []} for j in range(len(speeds))}
    if n_boot and (crits or speeds):
        rng = np.random.default_rng(seed)
        smooth, resid = _residual_model(t, v, smooth_revs)
        n_blocks = -(-s.size // block_revs)
        design = _Replicates(s, t, smooth, resid, block_revs, n_blocks, speeds, phase_width_pct)
        chunk = max(1, _CHUNK_VALUES // n_blocks)  # replicates drawn at once
        for first in range(0, n_boot, chunk):
            n = min(chunk, n_boot - first)
            w = np.empty((n_blocks, n), dtype=complex)
            off = np.zeros(n, dtype=complex)
            for r in range(n):  # the draws in the order of one replicate at a time
                w[:, r] = np.exp(2j * np.pi * rng.random(n_blocks))
                if offset_std:
                    off[r] = offset_std * complex(rng.standard_normal(), rng.standard_normal())
            if crits:
                rows = replicate_criticals(design.curves(w, off, afac), design.speed,
                                           time_s=design.time, amplitude_factor=afac,
                                           direction=direction, fit=use_fit,
                                           near_rpm=[c.speed_rpm for c in crits],
                                           within_pct=match_tolerance_pct)
                for got in rows:
                    for i, c in enumerate(crits):
                        g = _nearest(got or (), c.speed_rpm, match_tolerance_pct)
                        if g is None:
                            continue
                        rep[i]["speed"].append(g.speed_rpm)
                        rep[i]["af"].append(g.af_governing if g.af_method == c.af_method else None)
                        rep[i]["hp"].append(g.half_power.af if g.half_power is not None else None)
                        rep[i]["peak"].append(g.peak_amplitude)
            for j in range(len(speeds)):
                for lag, amp in design.phase_point(j, w, off, afac):
                    rep_phase[j]["lag"].append(lag)
                    rep_phase[j]["amp"].append(amp)

    out = []
    for i, c in enumerate(crits):
        r = rep[i]
        hp = c.half_power.af if c.half_power is not None else None
        out.append(CriticalEstimate(
            speed_rpm=float(c.speed_rpm), speed_std_rpm=_std(r["speed"]),
            af=c.af_governing, af_std=_std(r["af"]) if c.af_governing is not None else None,
            af_method=c.af_method, af_half_power=hp,
            af_half_power_std=_std(r["hp"]) if hp is not None else None,
            af_fit_std=c.fit.af_std if c.fit is not None else None,
            peak_amplitude=c.peak_amplitude,
            peak_amplitude_std=_std(r["peak"]) if c.peak_amplitude is not None else None,
            classification=c.classification, confidence=c.confidence,
            sweep_rate_rpm_s=c.sweep_rate_rpm_s, n_found=len(r["speed"]),
            n_af=sum(1 for x in r["af"] if x is not None), n_boot=int(n_boot) if crits else 0,
            critical=c))
    points = []
    for j, sp in enumerate(speeds):
        lag, amp, n = _phase_point(s, v, afac, sp, phase_width_pct)
        points.append(PhasePoint(sp, lag, _circ_std_deg(rep_phase[j]["lag"]) if lag is not None
                                 else None, amp, _std(rep_phase[j]["amp"]) if amp is not None
                                 else None, n))
    rate = None
    if np.ptp(t) > 0 and s.size >= 3:
        rate = float(np.polyfit(t, s, 1)[0]) if time_s is not None else None
    return CurveEstimate(direction, tuple(out), tuple(points), rate,
                         (float(s.min()), float(s.max())), int(s.size), int(n_boot), afac)
