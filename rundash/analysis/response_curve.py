"""One probe's 1X response as :func:`rundash.analysis.criticals.find_criticals` reads it.

Per-revolution vectors (thousands of noisy points, speed not uniformly spaced, not
monotonic at the ends) are averaged as complex vectors into speed bins and smoothed, with
the noise of the result per bin (:func:`prepare_curve`); the readings of one band of that
curve follow: its edges, a plateau that stalls a half-power descent, the polar loop, the
90-degree-phase speed and a one-mode fit. Pure numpy/scipy; the building blocks of
``find_criticals``, which alone calls them.
"""

from __future__ import annotations

import functools
import math
import warnings
from dataclasses import dataclass

import numpy as np
from scipy import signal

from rundash.analysis.amplification import HalfPower, Mode, fit_modes
from rundash.errors import AnalysisError, invalid_value


@dataclass(frozen=True)
class ResponseCurve:
    """One probe's 1X response on a uniform speed grid, as :func:`prepare_curve` reads it."""

    speed: np.ndarray  # uniform grid, rpm
    vector: np.ndarray  # smoothed complex phasor (|c| units)
    amp: np.ndarray  # amplitude_factor * |vector|
    lag: np.ndarray  # unwrapped lag, deg
    noise: np.ndarray  # 1-sigma noise of the smoothed amplitude per bin, amplitude_factor units
    floor: np.ndarray  # bound of the error the scatter does not show, per bin, same units
    smoothed: bool
    window_bins: int  # smoothing window in bins (1 when not smoothed)


def bin_vectors(speed: np.ndarray, vector: np.ndarray, bin_rpm: float | None, floor=None):
    """Average complex vectors into speed bins; return centres, means, counts, point sigma,
    the bin width and the mean ``floor`` per bin (zeros without one).

    The point sigma (per real component) is pooled from the scatter inside bins holding
    two or more points (the upper 5 % of bins trimmed against steep signal slopes);
    ``None`` when no bin holds two points.
    """
    order = np.argsort(speed, kind="stable")
    s, v = speed[order], vector[order]
    if bin_rpm is None:
        d = np.diff(s)
        d = d[d > 0]
        step = float(np.median(d)) if d.size else 1.0
        bin_rpm = max(step, (s[-1] - s[0]) / 4000.0)
    elif not (np.isfinite(bin_rpm) and bin_rpm > 0):
        raise AnalysisError(invalid_value("bin_rpm", bin_rpm, "a positive bin width in rpm or None"))
    n_bins = int(math.floor((s[-1] - s[0]) / bin_rpm + 0.5)) + 1
    centres = s[0] + bin_rpm * np.arange(n_bins)
    k = np.clip(np.floor((s - s[0]) / bin_rpm + 0.5).astype(int), 0, n_bins - 1)
    count = np.bincount(k, minlength=n_bins)
    re = np.bincount(k, v.real, minlength=n_bins)
    im = np.bincount(k, v.imag, minlength=n_bins)
    pw = np.bincount(k, np.abs(v) ** 2, minlength=n_bins)
    filled = count > 0
    mean = (re[filled] + 1j * im[filled]) / count[filled]
    sigma_point = None
    multi = count >= 2
    if np.count_nonzero(multi) >= 10:
        n = count[multi]
        m = (re[multi] + 1j * im[multi]) / n
        var = np.clip(pw[multi] / n - np.abs(m) ** 2, 0.0, None) * n / (n - 1)  # E|v - m|^2
        keep = var <= np.quantile(var, 0.95)
        sigma_point = float(np.sqrt(np.sum((n[keep] - 1) * var[keep]) / np.sum(n[keep] - 1) / 2.0))
    x = centres[filled]
    out = np.interp(centres, x, mean.real) + 1j * np.interp(centres, x, mean.imag)
    fl = np.zeros(n_bins)
    if floor is not None:
        fb = np.bincount(k, floor[order], minlength=n_bins)[filled] / count[filled]
        fl = np.interp(centres, x, fb)
    return centres, out, np.maximum(count, 1), sigma_point, float(bin_rpm), fl


@functools.lru_cache(maxsize=64)
def _quadratic_smoother(n_win: int):
    """The quadratic Savitzky-Golay window of ``n_win`` points and its two edge operators
    (the values a quadratic fitted to the first / last ``n_win`` points takes at the first
    / last ``n_win // 2`` points)."""
    h = n_win // 2
    proj = np.linalg.pinv(np.vander(np.arange(n_win, dtype=float), 3))
    head = np.vander(np.arange(h, dtype=float), 3) @ proj
    tail = np.vander(np.arange(n_win - h, n_win, dtype=float), 3) @ proj
    return signal.savgol_coeffs(n_win, 2), head, tail


def smooth_quadratic(x, n_win: int) -> np.ndarray:
    """``scipy.signal.savgol_filter(x, n_win, 2)`` (its default ``mode='interp'``) for a
    real or complex 1-D array, with the window and edge fits computed once per window
    length: the bootstrap of a comparison smooths the same length thousands of times.

    Examples
    --------
    >>> import numpy as np
    >>> from scipy import signal
    >>> x = np.random.default_rng(0).standard_normal(50)
    >>> bool(np.allclose(smooth_quadratic(x, 7), signal.savgol_filter(x, 7, 2)))
    True
    """
    x = np.asarray(x)
    coeffs, head, tail = _quadratic_smoother(int(n_win))
    h = n_win // 2
    out = np.convolve(x, coeffs, mode="same")
    out[:h] = head @ x[:n_win]
    out[-h:] = tail @ x[-n_win:]
    return out


def prepare_curve(speed, vector, amplitude_factor, bin_rpm, smooth_rpm, floor=None) -> ResponseCurve:
    grid, v, count, sigma_point, w, fl = bin_vectors(speed, vector, bin_rpm, floor)
    if sigma_point is not None:
        sig2 = sigma_point ** 2 / count
    else:  # one point per bin: noise from second differences (white noise: var 6 sigma^2)
        d2 = v[:-2] - 2 * v[1:-1] + v[2:]
        sig = 1.4826 * float(np.median(np.abs(np.concatenate([d2.real, d2.imag])))) / math.sqrt(6.0)
        sig2 = np.full(grid.size, sig * sig)
    vmax = float(np.max(np.abs(v))) or 1.0
    if smooth_rpm is None:
        noisy = float(np.sqrt(np.median(sig2))) > 1e-4 * vmax
        smooth_rpm = 0.004 * float(grid[-1]) if noisy else 0.0
    if smooth_rpm < 0:
        raise AnalysisError(invalid_value("smooth_rpm", smooth_rpm, "a window >= 0 rpm or None"))
    n_win = int(round(smooth_rpm / w)) | 1
    smoothed = 5 <= n_win < grid.size
    if smoothed:
        coeffs = _quadratic_smoother(n_win)[0]
        sig2 = np.convolve(np.pad(sig2, n_win // 2, mode="edge"), coeffs ** 2, mode="valid")
        v = smooth_quadratic(v, n_win)
        fl = np.convolve(np.pad(fl, n_win // 2, mode="edge"), np.ones(n_win) / n_win, mode="valid")
    lag = np.degrees(np.unwrap(-np.angle(v)))
    return ResponseCurve(grid, v, amplitude_factor * np.abs(v), lag, amplitude_factor * np.sqrt(sig2),
                  amplitude_factor * fl, smoothed, n_win if smoothed else 1)


def band_edges(amp: np.ndarray, i: int, frac: float, tol: float) -> tuple[int, int]:
    """Indices where the amplitude first falls below ``frac`` x peak, or its valley if it
    turns up (by more than ``tol``) first, or the data end."""
    target = frac * amp[i]
    out = []
    for step in (-1, 1):
        j, jmin = i, i
        while 0 <= j + step < amp.size:
            j += step
            if amp[j] < target:
                jmin = j
                break
            if amp[j] < amp[jmin]:
                jmin = j
            elif amp[j] > amp[jmin] + tol:
                break
        else:
            jmin = j
        out.append(jmin)
    return out[0], out[1]


def stalled_side(curve: ResponseCurve, i: int, hp: HalfPower, width_frac: float = 0.02,
           k_sigma: float = 3.0) -> str:
    """Side on which a noisy descent from the peak stalls before the half-power level.

    Walking from 95 % of the peak to N1 (N2) in chunks 2 % of Nc wide, the chunk means of a
    single mode keep falling; a pair that does not fall by ``k_sigma`` noise sigmas of the
    difference is a plateau held up by a neighbouring mode, which residual noise may hide
    as a bump. Returns ``'low'``, ``'high'`` or ``''``.
    """
    sp, amp = curve.speed, curve.amp
    width = max(width_frac * hp.nc_rpm, (hp.n2_rpm - hp.n1_rpm) / 8.0)
    for side, edge in (("low", hp.n1_rpm), ("high", hp.n2_rpm)):
        if side == "low":
            idx = np.arange(i, -1, -1)
            idx = idx[sp[idx] >= edge]
        else:
            idx = np.arange(i, sp.size)
            idx = idx[sp[idx] <= edge]
        idx = idx[amp[idx] <= 0.95 * hp.peak_amplitude]
        if idx.size == 0:
            continue
        d = np.abs(sp[idx] - sp[idx[0]])
        n_chunks = int(d[-1] // width)
        if n_chunks < 2:
            continue
        means, sig = [], []
        for k in range(n_chunks):
            m = (d >= k * width) & (d < (k + 1) * width)
            if not np.any(m):
                return ""  # a gap in the grid: no verdict on a plateau
            n_ind = max(np.count_nonzero(m) / curve.window_bins, 1.0)
            means.append(float(np.mean(amp[idx[m]])))
            sig.append(float(np.mean(curve.noise[idx[m]])) / math.sqrt(n_ind))
        for k in range(n_chunks - 1):
            if means[k] - means[k + 1] < k_sigma * math.hypot(sig[k], sig[k + 1]):
                return side
    return ""


def polar_loop(v: np.ndarray) -> tuple[bool | None, str]:
    """Kasa circle fit of the complex vectors; a loop if they sweep >= 90 deg on a circle."""
    if v.size < 8:
        return None, ""
    x, y = v.real, v.imag
    a = np.column_stack([x, y, np.ones_like(x)])
    b = x * x + y * y
    (p, q, r), *_ = np.linalg.lstsq(a, b, rcond=None)
    xc, yc = p / 2, q / 2
    rad = math.sqrt(max(r + xc * xc + yc * yc, 0.0))
    if rad == 0:
        return False, ""
    dist = np.hypot(x - xc, y - yc)
    misfit = float(np.sqrt(np.mean((dist - rad) ** 2)) / rad)
    arc = float(np.ptp(np.degrees(np.unwrap(np.angle((x - xc) + 1j * (y - yc))))))
    ok = arc >= 90.0 and misfit <= 0.1
    return ok, (f"the polar plot {'traces' if ok else 'does not trace'} a circular loop "
                f"through the band (arc {arc:.0f} deg, radial misfit {100 * misfit:.0f} % of "
                f"the radius)")


def quadrature_speed(curve: ResponseCurve, lo: int, hi: int, base: float, near: float) -> float | None:
    s, rel = curve.speed[lo:hi + 1], curve.lag[lo:hi + 1] - base
    d = rel - 90.0
    idx = np.nonzero((d[:-1] < 0) & (d[1:] >= 0))[0]
    if idx.size == 0:
        return None
    xs = s[idx] + (s[idx + 1] - s[idx]) * (-d[idx]) / (d[idx + 1] - d[idx])
    return float(xs[np.argmin(np.abs(xs - near))])


def fit_band(curve: ResponseCurve, lo: int, hi: int, initial) -> Mode | None:
    idx = np.arange(lo, hi + 1)
    if idx.size < 12:
        return None
    if idx.size > 400:
        idx = idx[np.linspace(0, idx.size - 1, 400).astype(int)]
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = fit_modes(curve.speed[idx], curve.vector[idx], n_modes=1, initial=(initial,),
                            residual="linear")
    except (AnalysisError, ValueError, np.linalg.LinAlgError):
        return None
    m = res.modes[0]
    s0, s1 = curve.speed[lo], curve.speed[hi]
    if not (res.success and res.relative_error < 0.15 and s0 <= m.fn_rpm <= s1
            and 0 < m.zeta < 1.5 and m.af_std < 0.5 * m.af):
        return None
    return m
