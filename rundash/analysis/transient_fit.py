"""The fit of transient modal identification: modes shared by every probe, through a sweep.

The model is :mod:`rundash.analysis.transient_model`; this module finds its natural
frequencies, damping ratios and complex participations from measured 1X vectors
(:func:`fit_transient`) and their bootstrap uncertainties.

---
Given the natural frequencies and damping ratios, the model is linear in the complex
participations and residual terms; they are eliminated by linear least squares (the
variable projection method of Golub and Pereyra), and only ``(omega_k, zeta_k)`` are
searched by :func:`scipy.optimize.least_squares`, with the analytic Jacobian of the
projected residual (Golub and Pereyra, in full) from the derivatives of the mode columns
with respect to the poles. All probes of a run share one design matrix, so one set of
modes costs one factorisation per evaluation whatever the number of probes. Probes are weighted by their own noise level (re-estimated from the residuals).

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

References
----------
American Petroleum Institute, API RP 684, 2nd ed., 2005 (half-power amplification factor;
edition from memory).
G. H. Golub and V. Pereyra, "The differentiation of pseudo-inverses and nonlinear least
squares problems whose variables separate", SIAM J. Numer. Anal. 10 (1973) 413-432.
X. Shao, "The dependent wild bootstrap", J. American Statistical Association 105 (2010)
218-235.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import replace
from typing import Sequence

import numpy as np
from scipy import linalg, optimize

from rundash.analysis.amplification import half_power
from rundash.analysis.transient_model import (
    PRE_ROLL_DECAYS, ProbeReading, TransientFit, TransientMode, integration_intervals,
    mode_means, mode_means_derivatives, sweep_history, unbalance_half_power_af,
    unbalance_peak_ratio, windowed_history,
)
from rundash.dsp.peaks import peaks_with_prominence
from rundash.errors import AnalysisError, invalid_value

__all__ = ["fit_transient", "ZETA_BOUNDS"]

#: Smallest and largest damping ratios searched.
ZETA_BOUNDS = (0.002, 0.9)


# --------------------------------------------------------------------------- the fit
def _noise_sigma(v: np.ndarray) -> np.ndarray:
    """Noise sigma per component of each row, from second differences (robust)."""
    if v.shape[1] < 5:
        return np.full(v.shape[0], np.nan)
    d2 = v[:, :-2] - 2 * v[:, 1:-1] + v[:, 2:]
    both = np.concatenate([d2.real, d2.imag], axis=1)
    return 1.4826 * np.median(np.abs(both), axis=1) / math.sqrt(6.0)


def _pre_roll_s(fn_rpm: float, zeta: float) -> float:
    """Seconds integrated before a mode's first fitted block: ``PRE_ROLL_DECAYS`` decay
    times, at most 300 s."""
    return min(PRE_ROLL_DECAYS / (zeta * 2 * np.pi * fn_rpm / 60.0), 300.0)


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
        self.iv = integration_intervals(hist, steps, pre_s)
        self.f_ref = f_ref
        self.s_ref = float(np.median(speed))
        x = (self.speed - self.s_ref) / self.s_ref
        self.res_cols = {"none": [], "constant": [np.ones_like(x) + 0j, 1j * np.ones_like(x)],
                         "linear": [np.ones_like(x) + 0j, 1j * np.ones_like(x), x + 0j, 1j * x]}[residual]
        self._cache: dict = {}
        self._last = None  # the last linear least squares (see _lsq)
        self._states: dict = {}  # (fn, zeta) -> the mode means' pass at the last design
        # modes held at given (fn, zeta): their columns are computed once
        self.fixed_cols = []
        for fn, z in fixed:
            iv = integration_intervals(hist, steps, _pre_roll_s(fn, z))
            self.fixed_cols += self._columns(iv, fn, z)

    def _columns(self, iv, fn: float, z: float) -> list[np.ndarray]:
        key = (fn, z, iv is self.iv)
        hit = self._cache.get(key)
        if hit is not None:
            return hit
        keep = None
        if iv is self.iv:  # the pass's values, for the derivatives at these parameters
            keep = self._states[(fn, z)] = {}
        a, b = mode_means(self.hist, iv, fn / 60.0, z, keep=keep, at=self.steps)
        return self._store(key, self._mode_cols(a, b))

    def _mode_cols(self, a: np.ndarray, b: np.ndarray) -> list[np.ndarray]:
        """The two columns of a mode from its means at the fitted steps."""
        a, b = self._avg(a), self._avg(b)
        return [a + b, 1j * (a - b)] if self.conj else [a, 1j * a]

    def _store(self, key, val):
        # columns (and derivatives) of recent parameters: a mode held, a repeated point
        if len(self._cache) > 64:
            self._cache.clear()
        self._cache[key] = val
        return val

    def _column_derivatives(self, fn: float, z: float) -> list[list[np.ndarray]]:
        """The derivatives of a mode's two columns with respect to its two parameters
        ``x = (fn / f_ref, ln zeta)``: ``[[dcol0, dcol1] per parameter]``."""
        key = ("d", fn, z)
        hit = self._cache.get(key)
        if hit is not None:
            return hit
        a, b, daf, dbf, daz, dbz = mode_means_derivatives(self.hist, self.iv, fn / 60.0, z,
                                                          keep=self._states.pop((fn, z), None),
                                                          at=self.steps)
        if (fn, z, True) not in self._cache:  # the same values as mode_means's
            self._store((fn, z, True), self._mode_cols(a, b))
        # d/dx0 = f_ref / 60 d/dfn_hz; d/dx1 = zeta d/dzeta
        cf = self.f_ref / 60.0
        return self._store(key, [self._mode_cols(cf * daf, cf * dbf),
                                 self._mode_cols(z * daz, z * dbz)])

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
        pars = self.params(x)
        for fn, z in pars:
            cols += self._columns(self.iv, fn, z)
        # the passes of the modes at x only (the Jacobian is asked for where the residuals
        # were last evaluated): what is held does not grow with the evaluations
        for key in [k for k in self._states if k not in pars]:
            del self._states[key]
        cols += self.fixed_cols + self.res_cols
        d = np.column_stack(cols)
        return np.vstack([d.real, d.imag])

    def solve(self, x: np.ndarray, Y: np.ndarray | None = None):
        """Design, linear coefficients (ncol, P) and residuals (2M, P) at ``x``.

        The design has a handful of columns: the least squares is solved by the normal
        equations of the column-equilibrated design (Cholesky), with an SVD fallback when
        they are ill conditioned (measured here: 0.7 ms against 16 ms for numpy's QR and
        56 ms for ``lstsq`` on 9000 x 6 with 15 probes)."""
        ls = self._lsq(x, Y)
        return ls["D"], ls["coef"], ls["e"]

    def _lsq(self, x: np.ndarray, Y: np.ndarray | None):
        """The linear least squares at ``x`` (see :meth:`solve`) with its factorisation;
        the last one is kept (the optimiser asks for the Jacobian where it last evaluated
        the residuals)."""
        last = self._last
        if (last is not None and last["Y"] is Y and last["rw"] is self.rw
                and np.array_equal(last["x"], x)):
            return last
        D = self.design(x)
        Yd = self.Y if Y is None else Y
        rw = np.concatenate([self.rw, self.rw])[:, None]  # row weights (local noise)
        Dw = D * rw
        norm = np.sqrt(np.einsum("ij,ij->j", Dw, Dw))
        norm[norm == 0] = 1.0
        Ds = Dw / norm
        G = Ds.T @ Ds
        cf = None
        try:
            if np.linalg.cond(G) > 1e10:
                raise np.linalg.LinAlgError("ill conditioned")
            cf = linalg.cho_factor(G, check_finite=False)
            coef = linalg.cho_solve(cf, Ds.T @ (Yd * rw), check_finite=False) / norm[:, None]
        except (np.linalg.LinAlgError, linalg.LinAlgError):
            cf = None
            coef, *_ = linalg.lstsq(Dw, Yd * rw, check_finite=False)
        self._last = dict(x=np.array(x, dtype=float), Y=Y, rw=self.rw, D=D, coef=coef,
                          e=Yd - D @ coef, Dw=Dw, Ds=Ds, norm=norm, cf=cf)
        return self._last

    def fun(self, x: np.ndarray, Y: np.ndarray | None = None) -> np.ndarray:
        _, _, e = self.solve(x, Y)
        rw = np.concatenate([self.rw, self.rw])[:, None]
        return (e * rw * self.w[None, :]).ravel()

    def jac(self, x: np.ndarray, Y: np.ndarray | None = None) -> np.ndarray:
        """The Jacobian of :meth:`fun`, analytic: the derivative of the variable-projection
        residual ``r = P_perp y`` of Golub and Pereyra (1973), in full,
        ``dr = -P_perp dD c - D^+T dD^T r`` (``c`` the linear coefficients, ``D^+`` the
        pseudo-inverse of the weighted design), with the mode columns' derivatives from
        :func:`mode_means_derivatives`."""
        ls = self._lsq(x, Y)
        coef, Dw, Ds, norm, cf = ls["coef"], ls["Dw"], ls["Ds"], ls["norm"], ls["cf"]
        rw = np.concatenate([self.rw, self.rw])[:, None]
        ew = ls["e"] * rw  # weighted residual (2M, P)
        n_col = Dw.shape[1]
        if cf is not None:
            def gsolve(v):  # (Dw^T Dw)^-1 v through the equilibrated factorisation
                return linalg.cho_solve(cf, v / norm[:, None], check_finite=False) / norm[:, None]
        else:
            U, sv, Vt = linalg.svd(Dw, full_matrices=False, check_finite=False)
            keep = sv > sv[0] * np.finfo(float).eps * max(Dw.shape) if sv.size else sv > 0
            inv2 = np.where(keep, 1.0 / np.where(keep, sv, 1.0) ** 2, 0.0)

            def gsolve(v):
                return Vt.T @ (inv2[:, None] * (Vt @ v))
        J = np.empty((ew.size, x.size))
        for k, (fn, z) in enumerate(self.params(x)):
            for j, (d0, d1) in enumerate(self._column_derivatives(fn, z)):
                dd = np.column_stack([d0, d1])
                dw = np.vstack([dd.real, dd.imag]) * rw  # (2M, 2) weighted
                t1 = dw @ coef[2 * k:2 * k + 2]  # dD c, (2M, P)
                v = np.zeros((n_col, ew.shape[1]))
                v[2 * k:2 * k + 2] = dw.T @ ew  # dD^T r
                # -P_perp dD c - D G^-1 dD^T r = -dD c + D G^-1 (D^T dD c - dD^T r)
                dr = Dw @ gsolve(Dw.T @ t1 - v) - t1
                J[:, 2 * k + j] = (dr * self.w[None, :]).ravel()
        return J

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
        # the running median of the edge-padded values (scipy.signal.medfilt's result
        # inside its zero padding)
        qs = np.median(np.lib.stride_tricks.sliding_window_view(np.pad(q, w // 2, mode="edge"), w),
                       axis=1)
        fac = np.sqrt(np.maximum(qs, 1e-12))
        return sig, fac / np.median(fac)  # sig (a MAD) carries the scale


def _fit_x(prob: _Problem, x0: np.ndarray, lo: np.ndarray, hi: np.ndarray, Y=None,
           max_nfev: int | None = None):
    x0 = np.clip(x0, lo + 1e-9, hi - 1e-9)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return optimize.least_squares(prob.fun, x0, jac=prob.jac, bounds=(lo, hi), args=(Y,),
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
        for i, prom in zip(*peaks_with_prominence(a)):
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
    sig, fac = noise
    en = e / (math.sqrt(2.0) * sig[None, :] * np.concatenate([fac, fac])[:, None])
    g_noise = np.sum(en[:M] ** 2 + en[M:] ** 2, axis=1) / e.shape[1]
    ratio = float(np.sqrt(np.mean(g_noise)))
    noise_block = sig * math.sqrt(float(np.mean(prob.counts)))  # per block, per component
    fit = TransientFit(tuple(modes), c0, c1, prob.s_ref, band, int(prob.steps.size), rms,
                       noise_block, ratio, rel, bool(sol.success), str(sol.message), (), 0, rss_w, int(n_obs),
                       int(n_par), prob.speed.copy(), g_noise,
                       (prob.w.copy(), prob.rw.copy()))
    if readings:
        fit = replace(fit, readings=tuple(_readings(fit.modes, fit.steady, band)))
    return fit


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
                  blocks=None, _weights=None) -> TransientFit:
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
    blocks : array_like of int, shape (m,), optional
        The blocks (ascending indices into ``time_s``) that the columns of ``vectors``
        (then of shape (P, m)) belong to; the other blocks have no vectors and are not
        fitted (the model still integrates through them). A caller holds only the blocks
        a band can take: the fit is the same as with every block's vectors given.

    Returns
    -------
    TransientFit

    Examples
    --------
    A 1000 rpm/s run-up through a 3000 rpm mode (zeta 0.05): the fit returns the steady
    values that the apparent peak (about 3 % high at this rate) misses.

    >>> import numpy as np
    >>> from rundash.analysis.transient_model import mode_response
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
    v = np.asarray(vectors)
    if v.dtype != np.complex64:  # complex64 stays so until the fitted blocks are taken
        v = v.astype(complex, copy=False)
    if v.ndim == 1:
        v = v[None, :]
    cols = None if blocks is None else np.asarray(blocks, dtype=np.int64)
    n_cols = t.size if cols is None else cols.size
    if v.ndim != 2 or v.shape[1] != n_cols:
        raise AnalysisError(invalid_value("vectors", f"shape {v.shape}", f"(P, {n_cols}) complex"))
    if cols is not None and cols.size and (cols[0] < 0 or cols[-1] >= t.size
                                           or np.any(np.diff(cols) <= 0)):
        raise AnalysisError(invalid_value("blocks", "not ascending block indices",
                                          f"ascending indices below {t.size}"))
    if residual not in ("none", "constant", "linear"):
        raise AnalysisError(invalid_value("residual", residual, "'none', 'constant' or 'linear'"))
    init = [(float(f), float(z)) for f, z in initial]
    if not init or len(init) > 6 or any(not (f > 0 and 0 < z < 1) for f, z in init):
        raise AnalysisError(invalid_value("initial", initial, "1 to 6 (fn_rpm > 0, 0 < zeta < 1) pairs"))
    band = tuple(float(b) for b in (band_rpm or _default_band(init, s)))
    finite = np.isfinite(v).all(axis=0)
    if cols is not None:
        finite, held = np.zeros(t.size, dtype=bool), finite
        finite[cols] = held
    ok = finite & (s >= band[0]) & (s <= band[1])
    if select is not None:
        ok &= np.asarray(select, dtype=bool)
    idx = np.flatnonzero(ok)
    f_ref = float(np.mean([f for f, _ in init]))
    z_lo = max(min(z for _, z in init) / 3.0, 0.005)
    f_lo = min(f for f, _ in init)
    pre_s = _pre_roll_s(f_lo, z_lo)
    # the history of the fitted blocks and their pre-rolls only (the same steps as the
    # whole run's: what the fit holds does not grow with the run's length)
    pre_max = max([pre_s] + [_pre_roll_s(float(f), float(z)) for f, z in fixed])
    i0, hist = (windowed_history(t, s, int(idx[0]), int(idx[-1]), pre_max,
                                 revs_per_block=revs_per_block, rev_index=rev_index)
                if idx.size else
                (0, sweep_history(t, s, revs_per_block=revs_per_block, rev_index=rev_index)))
    idx = idx[np.argsort(hist.data_step[idx - i0], kind="stable")]
    K = len(init)
    n_lin = 2 * K + 2 * len(fixed) + {"none": 0, "constant": 2, "linear": 4}[residual]
    if idx.size < max(3 * n_lin, 20):
        raise AnalysisError(invalid_value("band_rpm", band, f"a band holding at least "
                                          f"{max(3 * n_lin, 20)} blocks (got {idx.size})"))
    if idx.size > max_blocks:
        idx = idx[np.linspace(0, idx.size - 1, max_blocks).round().astype(int)]
    vi = v[:, idx if cols is None else np.searchsorted(cols, idx)].astype(complex, copy=False)
    data = vi.T  # (M, P)
    noise0 = _noise_sigma(vi)
    scale = np.where(np.isfinite(noise0) & (noise0 > 0), noise0,
                     np.maximum(np.sqrt(np.mean(np.abs(data) ** 2, axis=0)), 1e-300) * 1e-3)
    weights = 1.0 / scale
    group = max(1, int(math.ceil(idx.size / max_groups)))
    prob = _Problem(hist, hist.data_step[idx - i0], s[idx], data, weights, residual, conjugate_part,
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
    modes = tuple(replace(m, fn_std_rpm=_std(rec["fn"][k]), zeta_std=_std(rec["z"][k]),
                           peak_speed_std_rpm=_std(rec["pk"][k]), af_std=_std(rec["af"][k]))
                  for k, m in enumerate(fit.modes))
    readings = tuple(replace(r, speed_std_rpm=_std(rd[j]["speed"]),
                              af_std=_std(rd[j]["af"]) if r.af is not None else None)
                     for j, r in enumerate(fit.readings))
    return replace(fit, modes=modes, readings=readings, n_boot=int(n_boot))
