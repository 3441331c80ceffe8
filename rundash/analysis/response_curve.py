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
from scipy import linalg

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
    bins = speed_bins(speed, bin_rpm)
    sums, power = bin_sums(bins, np.asarray(vector)[None])
    out, sigma = _bin_means(bins, sums, power)
    return (bins.centres, out[0], np.maximum(bins.count, 1),
            None if sigma is None else float(sigma[0]), bins.width, _bin_floor(bins, floor))


@dataclass(frozen=True)
class SpeedBins:
    """The speed bins of :func:`bin_vectors` on one speed axis: the points' ``order`` by
    speed, the bin ``index`` of each point in that order, points per bin (``count``),
    bin ``centres`` and ``width`` in rpm."""

    order: np.ndarray
    index: np.ndarray
    count: np.ndarray
    centres: np.ndarray
    width: float


def speed_bins(speed: np.ndarray, bin_rpm: float | None = None) -> SpeedBins:
    """Bins of ``bin_rpm`` (default: the data spacing or 1/4000 of the range)."""
    order = np.argsort(speed, kind="stable")
    s = speed[order]
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
    return SpeedBins(order, k, np.bincount(k, minlength=n_bins), centres, float(bin_rpm))


def bin_sums(bins: SpeedBins, vectors: np.ndarray):
    """Per row of ``vectors`` (rows, points) the sum of the vectors and of their squared
    magnitudes in each bin, added in speed order: (rows, bins) complex and real."""
    n_bins = bins.count.size
    rows = vectors.shape[0]
    sums = np.empty((rows, n_bins), np.complex128)
    power = np.empty((rows, n_bins))
    # a row at a time: the work arrays are a few copies of one row, not of all rows
    # (each bin's points are added in the same order either way: the same sums)
    for r in range(rows):
        v = vectors[r, bins.order]
        sums[r].real = np.bincount(bins.index, np.ascontiguousarray(v.real), minlength=n_bins)
        sums[r].imag = np.bincount(bins.index, np.ascontiguousarray(v.imag), minlength=n_bins)
        a = np.abs(v)
        del v
        a *= a
        power[r] = np.bincount(bins.index, a, minlength=n_bins)
    return sums, power


def _bin_means(bins: SpeedBins, sums: np.ndarray, power: np.ndarray):
    """Bin means of each row from its sums (empty bins interpolated) and its point sigma
    (rows,), None when fewer than 10 bins hold two points."""
    count = bins.count
    filled = count > 0
    rows = sums.shape[0]
    mean = sums[:, filled] / count[filled]
    sigma_point = None
    multi = count >= 2
    if np.count_nonzero(multi) >= 10:
        n = count[multi]
        m = sums[:, multi] / n
        var = np.clip(power[:, multi] / n - np.abs(m) ** 2, 0.0, None) * n / (n - 1)  # E|v - m|^2
        cut = np.quantile(var, 0.95, axis=1)
        sigma_point = np.empty(rows)
        for r in range(rows):
            keep = var[r] <= cut[r]
            sigma_point[r] = math.sqrt(np.sum((n[keep] - 1) * var[r, keep])
                                       / np.sum(n[keep] - 1) / 2.0)
    if filled.all():
        return mean, sigma_point  # np.interp at its own abscissae returns them unchanged
    x = bins.centres[filled]
    if rows == 1:
        m_ = mean[0]
        return (np.interp(bins.centres, x, m_.real) + 1j * np.interp(bins.centres, x, m_.imag)
                )[None], sigma_point
    # several rows: the weights of np.interp's linear interpolation, shared by the rows
    j = np.clip(np.searchsorted(x, bins.centres, side="right") - 1, 0, x.size - 2)
    f = np.clip((bins.centres - x[j]) / (x[j + 1] - x[j]), 0.0, 1.0)
    return mean[:, j] * (1.0 - f) + mean[:, j + 1] * f, sigma_point


def _bin_floor(bins: SpeedBins, floor) -> np.ndarray:
    n_bins = bins.count.size
    if floor is None:
        return np.zeros(n_bins)
    filled = bins.count > 0
    fb = np.bincount(bins.index, floor[bins.order], minlength=n_bins)[filled] / bins.count[filled]
    return np.interp(bins.centres, bins.centres[filled], fb)


@functools.lru_cache(maxsize=64)
def _quadratic_smoother(n_win: int):
    """The quadratic Savitzky-Golay window of ``n_win`` points and its two edge operators
    (the values a quadratic fitted to the first / last ``n_win`` points takes at the first
    / last ``n_win // 2`` points)."""
    h = n_win // 2
    proj = np.linalg.pinv(np.vander(np.arange(n_win, dtype=float), 3))
    head = np.vander(np.arange(h, dtype=float), 3) @ proj
    tail = np.vander(np.arange(n_win - h, n_win, dtype=float), 3) @ proj
    # the window's weights: the minimum-norm solution of A c = e0 with A the powers 0..2 of
    # the offsets from the centre, as scipy.signal.savgol_coeffs(n_win, 2) forms it (tested)
    offsets = np.arange(h, -h - 1, -1, dtype=float)
    centre = linalg.lstsq(offsets ** np.arange(3).reshape(-1, 1), np.array([1.0, 0.0, 0.0]))[0]
    return centre, head, tail


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
    if x.ndim == 1:
        out = np.convolve(x, coeffs, mode="same")
        out[:h] = head @ x[:n_win]
        out[-h:] = tail @ x[-n_win:]
        return out
    out = _filter_rows(x, coeffs, "constant")
    out[:, :h] = x[:, :n_win] @ head.T
    out[:, -h:] = x[:, -n_win:] @ tail.T
    return out


def _filter_rows(x: np.ndarray, kernel: np.ndarray, mode: str) -> np.ndarray:
    """Each row of ``x`` convolved with the odd-length ``kernel``, centred ('same' size);
    outside the row zeros (``mode='constant'``) or the edge values (``'nearest'``). One
    row goes through numpy's convolve (bit for bit the single-curve result), several
    through scipy.ndimage (the same sums, added in another order)."""
    h = kernel.size // 2
    if x.shape[0] == 1:
        row = np.pad(x[0], h, mode="edge") if mode == "nearest" else x[0]
        return np.convolve(row, kernel, mode="valid" if mode == "nearest" else "same")[None]
    from scipy import ndimage  # here: only several rows need it

    if np.iscomplexobj(x):
        return (ndimage.convolve1d(x.real, kernel, axis=1, mode=mode)
                + 1j * ndimage.convolve1d(x.imag, kernel, axis=1, mode=mode))
    return ndimage.convolve1d(x, kernel, axis=1, mode=mode)


def prepare_curve(speed, vector, amplitude_factor, bin_rpm, smooth_rpm, floor=None) -> ResponseCurve:
    bins = speed_bins(speed, bin_rpm)
    sums, power = bin_sums(bins, np.asarray(vector)[None])
    return curves_from_sums(bins, sums, power, amplitude_factor, smooth_rpm,
                            _bin_floor(bins, floor))[0]


def prepare_curves(speed, vectors, amplitude_factor, bin_rpm, smooth_rpm) -> list[ResponseCurve]:
    """:func:`prepare_curve` of each row of ``vectors`` (rows, points) on one speed axis."""
    bins = speed_bins(speed, bin_rpm)
    return curves_from_sums(bins, *bin_sums(bins, np.asarray(vectors)), amplitude_factor,
                            smooth_rpm)


def curves_from_sums(bins: SpeedBins, sums, power, amplitude_factor, smooth_rpm, floor_bins=None
                     ) -> list[ResponseCurve]:
    """:func:`prepare_curve` of each row of bin sums (:func:`bin_sums`; a bootstrap may
    form its replicates' sums directly): the rows are smoothed and unwrapped together.
    ``floor_bins``: the floor per bin, shared (default none)."""
    v, sigma_point = _bin_means(bins, np.asarray(sums), np.asarray(power))
    grid, w = bins.centres, bins.width
    count = np.maximum(bins.count, 1)
    fl = np.zeros(grid.size) if floor_bins is None else floor_bins
    rows = v.shape[0]
    if sigma_point is not None:
        sig2 = sigma_point[:, None] ** 2 / count
    else:  # one point per bin: noise from second differences (white noise: var 6 sigma^2)
        d2 = v[:, :-2] - 2 * v[:, 1:-1] + v[:, 2:]
        sig = 1.4826 * np.median(np.abs(np.concatenate([d2.real, d2.imag], axis=1)), axis=1) \
            / math.sqrt(6.0)
        sig2 = np.repeat((sig * sig)[:, None], grid.size, axis=1)
    vmax = np.max(np.abs(v), axis=1)
    vmax[vmax == 0] = 1.0
    if smooth_rpm is None:
        noisy = np.sqrt(np.median(sig2, axis=1)) > 1e-4 * vmax
        window = np.where(noisy, 0.004 * float(grid[-1]), 0.0)
    elif smooth_rpm < 0:
        raise AnalysisError(invalid_value("smooth_rpm", smooth_rpm, "a window >= 0 rpm or None"))
    else:
        window = np.full(rows, float(smooth_rpm))
    out: list[ResponseCurve | None] = [None] * rows
    for smooth in np.unique(window):  # rows alike in smoothing go together
        sel = np.flatnonzero(window == smooth)
        vs, s2, fs = v[sel], sig2[sel], fl
        n_win = int(round(float(smooth) / w)) | 1
        smoothed = 5 <= n_win < grid.size
        if smoothed:
            coeffs = _quadratic_smoother(n_win)[0]
            s2 = _filter_rows(s2, coeffs ** 2, "nearest")
            vs = smooth_quadratic(vs, n_win) if sel.size > 1 else smooth_quadratic(vs[0], n_win)[None]
            fs = _filter_rows(fl[None], np.ones(n_win) / n_win, "nearest")[0]
        lag = np.degrees(np.unwrap(-np.angle(vs), axis=1))
        amp = amplitude_factor * np.abs(vs)
        noise = amplitude_factor * np.sqrt(s2)
        for j, r in enumerate(sel):
            out[r] = ResponseCurve(grid, vs[j], amp[j], lag[j], noise[j], amplitude_factor * fs,
                                   smoothed, n_win if smoothed else 1)
    return out


def band_edges(amp: np.ndarray, i: int, frac: float, tol: float) -> tuple[int, int]:
    """Indices where the amplitude first falls below ``frac`` x peak, or its valley if it
    turns up (by more than ``tol``) first, or the data end."""
    target = frac * amp[i]
    out = []
    for step in (-1, 1):
        seg = amp[i + step::step] if (step > 0 or i > 0) else amp[:0]
        if seg.size == 0:
            out.append(i)
            continue
        head = np.concatenate(([amp[i]], seg))
        running_min = np.minimum.accumulate(head)[1:]
        stop = (seg < target) | (seg > running_min + tol)
        k = int(np.argmax(stop))
        if not stop[k]:  # the data end
            out.append(i + step * seg.size)
        elif seg[k] < target:
            out.append(i + step * (k + 1))
        else:  # turned up: the valley (the first lowest point) before it
            out.append(i + step * int(np.argmin(head[:k + 1])))
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
