"""Amplification factors of a critical speed: half-power, phase and modal-fit estimates.

All functions are pure: arrays in, frozen dataclasses out. Speeds are in rpm, phase lags
in degrees (see :mod:`rundash.conventions`), amplitudes in whatever unit the caller uses
(the estimates are ratios and do not depend on it).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
from scipy import optimize

from rundash.dsp.peaks import peaks_with_prominence
from rundash.errors import AnalysisError, SignalQualityWarning, invalid_value

#: Half-power level: the amplitude at N1 and N2 relative to the peak (1/sqrt(2) ~ 0.707).
HALF_POWER_LEVEL = 1.0 / math.sqrt(2.0)


def _as_speed_axis(speed_rpm, name: str = "speed_rpm") -> np.ndarray:
    s = np.asarray(speed_rpm, dtype=float)
    if s.ndim != 1 or s.size < 3:
        raise AnalysisError(invalid_value(name, f"shape {s.shape}", "a 1-D array of at least 3 speeds"))
    if not np.all(np.isfinite(s)):
        raise AnalysisError(invalid_value(name, "non-finite values", "finite speeds in rpm"))
    if np.any(np.diff(s) <= 0):
        raise AnalysisError(invalid_value(name, "a non-increasing axis", "strictly increasing speeds in rpm"))
    return s


def _same_length(a, s: np.ndarray, name: str, dtype=float) -> np.ndarray:
    a = np.asarray(a, dtype=dtype)
    if a.shape != s.shape:
        raise AnalysisError(invalid_value(name, f"shape {a.shape}", f"the shape of speed_rpm {s.shape}"))
    if not np.all(np.isfinite(a)):
        raise AnalysisError(invalid_value(name, "non-finite values", "finite values"))
    return a


def _refine_peak(s: np.ndarray, a: np.ndarray, i: int,
                 top_fraction: float | None = None) -> tuple[float, float]:
    """Speed and height of a parabola through the peak sample and its two neighbours, or
    (``top_fraction``) fitted by least squares to the contiguous samples above that
    fraction of the peak sample (which averages residual noise)."""
    if i <= 0 or i >= s.size - 1:
        return float(s[i]), float(a[i])
    lo, hi = i - 1, i + 1
    if top_fraction is not None:  # the contiguous run of samples >= floor around the peak
        floor = top_fraction * a[i]
        lo -= _run_length(a[lo - 1::-1] >= floor) if lo > 0 else 0
        hi += _run_length(a[hi + 1:] >= floor)
    x = s[lo:hi + 1] - s[i]
    coef = np.polyfit(x, a[lo:hi + 1], 2)
    if coef[0] >= 0:
        return float(s[i]), float(a[i])
    xv = -coef[1] / (2.0 * coef[0])
    if not (x[0] <= xv <= x[-1]):
        return float(s[i]), float(a[i])
    return float(s[i] + xv), float(np.polyval(coef, xv))


# --------------------------------------------------------------------------- half power
@dataclass(frozen=True)
class HalfPower:
    """Half-power bandwidth estimate of one amplitude peak (API 684 method).

    Attributes
    ----------
    af : float or None
        Amplification factor ``nc_rpm / (n2_rpm - n1_rpm)``; ``None`` when not determinable.
    n1_rpm, n2_rpm : float or None
        Speeds below and above the peak where the amplitude equals ``level`` x peak.
    nc_rpm : float
        Peak speed (parabolic refinement through the three highest samples).
    peak_amplitude : float
        Peak amplitude (same unit as the input).
    determinable : bool
        False when the response does not fall to the half-power level on both sides
        inside the data, or turns up (merges with a neighbouring peak) before it does.
    reason : str
        Plain-language explanation; empty when determinable.
    """

    af: float | None
    n1_rpm: float | None
    n2_rpm: float | None
    nc_rpm: float
    peak_amplitude: float
    determinable: bool
    reason: str = ""


def _run_length(flags: np.ndarray) -> int:
    """Number of leading True values."""
    if flags.size == 0:
        return 0
    k = int(np.argmin(flags))
    return flags.size if flags[k] else k


def _walk(a: np.ndarray, i: int, step: int, target: float, rise: float) -> tuple[int | None, str]:
    """Walk from the peak until ``a`` falls below ``target``; stop if it turns up first
    (by more than ``rise`` above the running minimum, the peak included)."""
    seg = a[i + step::step] if (step > 0 or i > 0) else a[:0]
    running_min = np.minimum.accumulate(np.concatenate(([a[i]], seg)))[1:]
    stop = (seg < target) | (seg > running_min + rise)
    k = int(np.argmax(stop)) if seg.size else 0
    if seg.size == 0 or not stop[k]:
        return None, "does not fall to the half-power level inside the data"
    if seg[k] < target:
        return i + step * (k + 1), ""
    return None, "merges with a neighbouring peak"


def half_power(speed_rpm, amplitude, *, peak_index: int | None = None,
               peak_speed: float | None = None, level: float = HALF_POWER_LEVEL,
               rise_tolerance: float = 0.0, peak_fit_fraction: float | None = None
               ) -> HalfPower:
    """Amplification factor of one peak by the half-power bandwidth method.

    ``AF = Nc / (N2 - N1)`` with ``N1 < Nc < N2`` the speeds where the amplitude equals
    ``level`` x peak, found by linear interpolation between samples. Walking away from
    the peak, the amplitude must fall below that level before it turns upward; otherwise
    that side merges with a neighbouring peak and the AF is not determinable by
    half-power. The curve is never extrapolated beyond the data.

    Parameters
    ----------
    speed_rpm : array_like, shape (n,)
        Strictly increasing shaft speeds in rpm.
    amplitude : array_like, shape (n,)
        Slow-roll-compensated 1X amplitude at those speeds (any unit).
    peak_index : int, optional
        Index of the peak sample. Exactly one of ``peak_index`` and ``peak_speed``.
    peak_speed : float, optional
        Approximate peak speed in rpm; the highest sample within the local maximum
        nearest to it is used.
    level : float
        Half-power level relative to the peak, default ``1/sqrt(2)`` (0.7071).
    rise_tolerance : float
        A rise above the running minimum smaller than this fraction of the peak is not
        taken as a turn-up (for curves with residual noise). Default 0: any rise counts.
    peak_fit_fraction : float, optional
        Default None: the peak is refined by a parabola through the three highest
        samples. A fraction (e.g. 0.95) fits the parabola by least squares to all
        contiguous samples above that fraction of the peak, for noisy curves.

    Returns
    -------
    HalfPower

    References
    ----------
    American Petroleum Institute, API RP 684, "API Standard Paragraphs Rotordynamic
    Tutorial: Lateral Critical Speeds, Unbalance Response, Stability, Train Torsionals,
    and Rotor Balancing", 2nd ed., 2005 (half-power bandwidth amplification factor;
    edition from memory).

    Examples
    --------
    Single-degree-of-freedom unbalance response at zeta = 0.05 (closed-form AF 9.900):

    >>> import numpy as np
    >>> r = np.linspace(0.5, 1.5, 20001)
    >>> amp = r**2 / np.sqrt((1 - r**2)**2 + (0.1 * r)**2)
    >>> round(half_power(3000 * r, amp, peak_index=int(np.argmax(amp))).af, 2)
    9.9
    """
    s = _as_speed_axis(speed_rpm)
    a = _same_length(amplitude, s, "amplitude")
    if not (0.0 < level < 1.0):
        raise AnalysisError(invalid_value("level", level, "a fraction between 0 and 1"))
    if rise_tolerance < 0:
        raise AnalysisError(invalid_value("rise_tolerance", rise_tolerance, "a fraction >= 0"))
    if (peak_index is None) == (peak_speed is None):
        raise AnalysisError(invalid_value("peak_index/peak_speed", (peak_index, peak_speed),
                                          "exactly one of the two"))
    if peak_index is None:
        i = int(np.argmin(np.abs(s - float(peak_speed))))
        while 0 < i and a[i - 1] > a[i]:
            i -= 1
        while i < s.size - 1 and a[i + 1] > a[i]:
            i += 1
    else:
        i = int(peak_index)
        if not 0 <= i < s.size:
            raise AnalysisError(invalid_value("peak_index", peak_index, f"an index in 0..{s.size - 1}"))
    if peak_fit_fraction is not None and not 0 < peak_fit_fraction < 1:
        raise AnalysisError(invalid_value("peak_fit_fraction", peak_fit_fraction, "a fraction between 0 and 1 or None"))
    nc, peak = _refine_peak(s, a, i, peak_fit_fraction)
    if peak <= 0:
        return HalfPower(None, None, None, nc, peak, False, "peak amplitude is not positive")
    target = level * peak
    rise = rise_tolerance * peak
    jl, why_l = _walk(a, i, -1, target, rise)
    jh, why_h = _walk(a, i, +1, target, rise)
    n1 = n2 = None
    if jl is not None:
        n1 = float(np.interp(target, [a[jl], a[jl + 1]], [s[jl], s[jl + 1]]))
    if jh is not None:
        n2 = float(np.interp(target, [a[jh], a[jh - 1]], [s[jh], s[jh - 1]]))
    if n1 is None or n2 is None:
        parts = []
        if n1 is None:
            parts.append(f"low side {why_l}")
        if n2 is None:
            parts.append(f"high side {why_h}")
        return HalfPower(None, n1, n2, nc, peak, False,
                         "not determinable by half-power: " + "; ".join(parts))
    return HalfPower(nc / (n2 - n1), n1, n2, nc, peak, True, "")


# --------------------------------------------------------------------------- phase
@dataclass(frozen=True)
class PhaseAF:
    """Phase-based cross-checks of the amplification factor.

    Attributes
    ----------
    af_slope : float or None
        ``(Nc/2) * dphi/dN`` at the 90-degree speed (phi in rad, N in rpm).
    af_45_135 : float or None
        ``nc_geo / (n135 - n45)``.
    n45, n90, n135 : float or None
        Speeds in rpm where the lag, relative to ``baseline_deg``, rises through 90 deg
        (the crossing nearest ``nc_rpm``) and through 45 and 135 deg (the crossings
        nearest ``n90``), by linear interpolation.
    nc_geo : float or None
        ``sqrt(n45 * n135)``; equals the natural frequency for a viscous SDOF mode.
    slope_deg_per_rpm : float or None
        Lag slope at ``n90``.
    baseline_deg : float
        Below-resonance lag subtracted before reading the 45/90/135 points.
    reason : str
        Why an estimate is missing; empty when both are available.
    """

    af_slope: float | None
    af_45_135: float | None
    n45: float | None
    n90: float | None
    n135: float | None
    nc_geo: float | None
    slope_deg_per_rpm: float | None
    baseline_deg: float
    reason: str = ""


def _crossing_near(s: np.ndarray, y: np.ndarray, value: float, near: float) -> float | None:
    """Speed nearest ``near`` where ``y`` crosses ``value`` upward (linear interpolation)."""
    d = y - value
    idx = np.nonzero((d[:-1] < 0) & (d[1:] >= 0))[0]
    if idx.size == 0:
        return None
    xs = s[idx] + (s[idx + 1] - s[idx]) * (-d[idx]) / (d[idx + 1] - d[idx])
    return float(xs[np.argmin(np.abs(xs - near))])


def phase_af(speed_rpm, lag_deg, *, nc_rpm: float, baseline_deg: float | None = None) -> PhaseAF:
    """Amplification factor from the phase lag: slope at 90 degrees and 45/135 points.

    For a viscous single-degree-of-freedom mode, ``tan(lag) = 2 zeta r / (1 - r^2)``,
    which gives ``dlag/dr = 1/zeta`` at ``r = 1`` (hence ``AF = (Nc/2) dphi/dN =
    1/(2 zeta)``) and ``r45 * r135 = 1`` with ``r135 - r45 = 2 zeta`` exactly (hence
    ``Nc = sqrt(N45 N135)`` and ``AF = Nc / (N135 - N45)``).

    Parameters
    ----------
    speed_rpm : array_like, shape (n,)
        Strictly increasing shaft speeds in rpm.
    lag_deg : array_like, shape (n,)
        Phase lag in degrees (see :mod:`rundash.conventions`); it is unwrapped here.
    nc_rpm : float
        Critical speed estimate in rpm; the crossings nearest to it are used.
    baseline_deg : float, optional
        Below-resonance lag of the mode to subtract (for an SDOF mode ``-arg`` of its
        residue, see :func:`fit_modes`); default: the lag at the slowest speed, which
        is only a rough stand-in (about 2 deg high at r = 0.3 for zeta = 0.05, and
        meaningless where slow-roll compensation leaves almost no amplitude).

    Returns
    -------
    PhaseAF

    References
    ----------
    API RP 684, 2nd ed., 2005, phase-slope and 45/135-degree cross-checks of the
    amplification factor (from memory). The SDOF identities follow from the closed form,
    e.g. W. T. Thomson, M. D. Dahleh, "Theory of Vibration with Applications", 5th ed.,
    Prentice Hall, 1998, ch. 3.

    Examples
    --------
    >>> import numpy as np
    >>> r = np.linspace(0.3, 2.0, 5001)
    >>> lag = np.degrees(np.arctan2(0.1 * r, 1 - r**2))
    >>> res = phase_af(3000 * r, lag, nc_rpm=3000.0, baseline_deg=0.0)
    >>> round(res.af_45_135, 2), round(res.nc_geo)
    (10.0, 3000)
    """
    s = _as_speed_axis(speed_rpm)
    lag = np.degrees(np.unwrap(np.radians(_same_length(lag_deg, s, "lag_deg"))))
    if not (np.isfinite(nc_rpm) and nc_rpm > 0):
        raise AnalysisError(invalid_value("nc_rpm", nc_rpm, "a positive speed in rpm"))
    base = float(lag[0]) if baseline_deg is None else float(baseline_deg)
    # bring the baseline to the same 360-degree branch as the unwrapped lag near the start
    base = base + 360.0 * round((lag[0] - base) / 360.0)
    rel = lag - base
    n90 = _crossing_near(s, rel, 90.0, nc_rpm)
    reasons = []
    af_slope = slope = None
    if n90 is None:
        reasons.append("lag does not cross 90 deg above the baseline")
        n45 = _crossing_near(s, rel, 45.0, nc_rpm)
        n135 = _crossing_near(s, rel, 135.0, nc_rpm)
    else:
        k = int(np.clip(np.searchsorted(s, n90), 1, s.size - 1))
        lo, hi = max(k - 2, 0), min(k + 2, s.size)
        slope = float(np.polyfit(s[lo:hi], rel[lo:hi], 1)[0])
        if slope > 0:
            af_slope = 0.5 * n90 * math.radians(slope)
        else:
            reasons.append("lag slope at 90 deg is not positive")
        n45 = _crossing_near(s, rel, 45.0, n90)
        n135 = _crossing_near(s, rel, 135.0, n90)
    af45 = geo = None
    if n45 is not None and n135 is not None and n135 > n45:
        geo = math.sqrt(n45 * n135)
        af45 = geo / (n135 - n45)
    else:
        reasons.append("lag does not pass both 45 and 135 deg above the baseline")
    return PhaseAF(af_slope, af45, n45, n90, n135, geo, slope, base, "; ".join(reasons))


# --------------------------------------------------------------------------- modal fit
@dataclass(frozen=True)
class Mode:
    """One fitted unbalance-type mode.

    ``fn_rpm`` is the undamped natural frequency in rpm, ``zeta`` the damping ratio,
    ``af = 1/(2 zeta)``; ``*_std`` are one-sigma uncertainties from the Jacobian.
    ``residue`` is the complex modal amplitude (the response tends to ``residue`` well
    above ``fn_rpm``), in the unit of the fitted vector.
    """

    fn_rpm: float
    zeta: float
    af: float
    fn_std: float
    zeta_std: float
    af_std: float
    residue: complex
    residue_std: float

    @property
    def peak_speed_rpm(self) -> float | None:
        """Amplitude peak of this mode alone, ``fn / sqrt(1 - 2 zeta^2)`` (unbalance)."""
        q = 1.0 - 2.0 * self.zeta ** 2
        return self.fn_rpm / math.sqrt(q) if q > 0 else None


@dataclass(frozen=True)
class ModalFit:
    """Result of :func:`fit_modes`.

    ``constant`` and ``slope_per_rpm`` are the complex residual terms, ``rms_error`` the
    rms of the complex misfit in the unit of the vector, ``relative_error`` that rms over
    the rms of the data, ``success``/``message`` from the optimiser.
    """

    modes: tuple[Mode, ...]
    constant: complex
    slope_per_rpm: complex
    rms_error: float
    relative_error: float
    success: bool
    message: str

    def model(self, speed_rpm) -> np.ndarray:
        """Evaluate the fitted complex response at ``speed_rpm``."""
        s = np.asarray(speed_rpm, dtype=float)
        out = self.constant + self.slope_per_rpm * s + 0j
        for m in self.modes:
            out = out + unbalance_response(s, m.fn_rpm, m.zeta) * m.residue
        return out


def unbalance_response(speed_rpm, fn_rpm: float, zeta: float) -> np.ndarray:
    """1X phasor of a single-degree-of-freedom unbalance response, unit residue.

    ``r^2 / (1 - r^2 + 2 j zeta r)`` with ``r = N / fn`` (W. T. Thomson, M. D. Dahleh,
    "Theory of Vibration with Applications", 5th ed., 1998, sec. 3.3), in the phasor
    convention of :mod:`rundash.conventions` (lag 90 deg at ``fn``, 180 deg well above):
    the one mode :func:`fit_modes` fits, and the response the Examples of the analysis
    layer are read from.

    >>> c = unbalance_response([1500.0, 3000.0, 6000.0], 3000.0, 0.05)
    >>> np.round(np.abs(c), 3), np.round(np.degrees(-np.angle(c)), 1)
    (array([ 0.333, 10.   ,  1.33 ]), array([  3.8,  90. , 176.2]))
    """
    r = np.asarray(speed_rpm, dtype=float) / fn_rpm
    return r * r / (1.0 - r * r + 2j * zeta * r)


def _initial_modes(s: np.ndarray, v: np.ndarray, n_modes: int) -> list[tuple[float, float]]:
    a = np.abs(v)
    idx, prom = peaks_with_prominence(a)
    if idx.size == 0:
        return [(float(s[np.argmax(a)]), 0.2)] * n_modes
    order = np.argsort(prom)[::-1][:n_modes]
    out = []
    for i in sorted(idx[order]):
        hp = half_power(s, a, peak_index=int(i))
        af = hp.af if hp.af else 5.0
        out.append((float(s[i]), float(np.clip(0.5 / af, 0.01, 0.5))))
    while len(out) < n_modes:
        out.append((float(s[-1]) * 0.9, 0.2))
    return out


def fit_modes(speed_rpm, vector, *, n_modes: int = 1,
              initial: tuple[tuple[float, float], ...] | None = None,
              residual: str = "linear") -> ModalFit:
    """Least-squares modal curve fit of a complex 1X response.

    Model, with ``r_k = N / fn_k``::

        c(N) = sum_k R_k r_k^2 / (1 - r_k^2 + 2 i zeta_k r_k) + C0 + C1 N

    i.e. unbalance-type single-degree-of-freedom modes with complex residues ``R_k``
    plus a residual term (``'none'``, ``'constant'`` C0 or ``'linear'`` C0 + C1 N) for
    out-of-band modes and imperfect slow-roll compensation. The sign follows
    :mod:`rundash.conventions` (``c = |c| exp(-i lag)``, lag rising through a mode).
    Parameters are found by :func:`scipy.optimize.least_squares`; their covariance is
    ``s^2 (J^T J)^-1`` with ``s^2`` the residual variance.

    The fitted ``AF = 1/(2 zeta)``. For light damping the half-power points of such a
    mode sit at ``r ~ 1 -/+ zeta``, so the half-power bandwidth is ``2 zeta fn`` and the
    half-power AF tends to ``1/(2 zeta)``; for unbalance excitation it is slightly lower
    (9.900 vs 10 at zeta 0.05, 4.797 vs 5 at 0.10, 2.073 vs 2.5 at 0.20).

    Parameters
    ----------
    speed_rpm : array_like, shape (n,)
        Strictly increasing shaft speeds in rpm.
    vector : array_like of complex, shape (n,)
        Slow-roll-compensated 1X phasors at those speeds.
    n_modes : int
        Number of modes to fit (1 to 4).
    initial : tuple of (fn_rpm, zeta), optional
        Starting values, one pair per mode; default from the amplitude peaks.
    residual : {'none', 'constant', 'linear'}
        Residual term.

    Returns
    -------
    ModalFit

    References
    ----------
    D. J. Ewins, "Modal Testing: Theory, Practice and Application", 2nd ed., Research
    Studies Press, 2000, ch. 4 (curve fitting of frequency response data with residual
    terms).

    Examples
    --------
    >>> n = np.linspace(1500, 4500, 301)
    >>> m = fit_modes(n, 10 * unbalance_response(n, 3000, 0.05)).modes[0]
    >>> round(m.fn_rpm), round(m.zeta, 3), round(m.af, 1)
    (3000, 0.05, 10.0)
    """
    s = _as_speed_axis(speed_rpm)
    v = _same_length(vector, s, "vector", dtype=complex)
    if not (isinstance(n_modes, (int, np.integer)) and 1 <= n_modes <= 4):
        raise AnalysisError(invalid_value("n_modes", n_modes, "an integer from 1 to 4"))
    if residual not in ("none", "constant", "linear"):
        raise AnalysisError(invalid_value("residual", residual, "'none', 'constant' or 'linear'"))
    n_res = {"none": 0, "constant": 1, "linear": 2}[residual]
    n_par = 4 * n_modes + 2 * n_res
    if 2 * s.size <= n_par + 2:
        raise AnalysisError(invalid_value("speed_rpm", f"{s.size} points",
                                          f"more than {n_par // 2 + 1} points for {n_modes} mode(s)"))
    if initial is None:
        initial = tuple(_initial_modes(s, v, n_modes))
    if len(initial) != n_modes:
        raise AnalysisError(invalid_value("initial", initial, f"{n_modes} (fn_rpm, zeta) pairs"))
    scale_s = float(np.max(s))
    scale_v = float(np.max(np.abs(v))) or 1.0
    x_s = s / scale_s
    y = v / scale_v

    def basis(p):
        cols = []
        for k in range(n_modes):
            cols.append(unbalance_response(x_s, p[2 * k], p[2 * k + 1]))
        if n_res >= 1:
            cols.append(np.ones_like(x_s) + 0j)
        if n_res == 2:
            cols.append(x_s + 0j)
        return np.column_stack(cols)

    # variable projection: the complex residues and residual terms enter linearly
    def linear_part(p):
        b = basis(p)
        coef, *_ = np.linalg.lstsq(b, y, rcond=None)
        return b, coef

    def resid_nl(p):
        b, coef = linear_part(p)
        e = b @ coef - y
        return np.concatenate([e.real, e.imag])

    p0 = []
    for fn, z in initial:
        p0 += [float(fn) / scale_s, float(np.clip(z, 1e-3, 1.5))]
    lo = [v_ for _ in range(n_modes) for v_ in (1e-3, 1e-4)]
    hi = [v_ for _ in range(n_modes) for v_ in (10.0, 3.0)]
    sol_nl = optimize.least_squares(resid_nl, p0, bounds=(lo, hi), x_scale="jac")
    _, coef = linear_part(sol_nl.x)

    # full problem from the projected solution, for the covariance of every parameter
    def resid_full(q):
        p = q[:2 * n_modes]
        lin = q[2 * n_modes::2] + 1j * q[2 * n_modes + 1::2]
        e = basis(p) @ lin - y
        return np.concatenate([e.real, e.imag])

    q0 = np.concatenate([sol_nl.x, np.column_stack([coef.real, coef.imag]).ravel()])
    sol = optimize.least_squares(resid_full, q0, x_scale="jac", method="lm")
    q = sol.x
    m = 2 * s.size
    dof = max(m - q.size, 1)
    s2 = float(np.sum(sol.fun ** 2)) / dof
    jtj = sol.jac.T @ sol.jac
    try:
        cov = np.linalg.inv(jtj) * s2
        std = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    except np.linalg.LinAlgError:
        std = np.full(q.size, np.inf)
        warnings.warn("modal fit: singular Jacobian, uncertainties unknown", SignalQualityWarning,
                      stacklevel=2)
    modes = []
    for k in range(n_modes):
        fn = q[2 * k] * scale_s
        z = abs(q[2 * k + 1])
        fn_std = std[2 * k] * scale_s
        z_std = std[2 * k + 1]
        j = 2 * n_modes + 2 * k
        res = complex(q[j], q[j + 1]) * scale_v
        res_std = float(math.hypot(std[j], std[j + 1]) * scale_v)
        af = 0.5 / z if z > 0 else math.inf
        af_std = z_std / (2 * z * z) if z > 0 else math.inf
        modes.append(Mode(float(fn), float(z), float(af), float(fn_std), float(z_std),
                          float(af_std), res, res_std))
    j0 = 4 * n_modes
    c0 = complex(q[j0], q[j0 + 1]) * scale_v if n_res >= 1 else 0j
    c1 = complex(q[j0 + 2], q[j0 + 3]) * scale_v / scale_s if n_res == 2 else 0j
    rms = float(np.sqrt(np.mean(sol.fun[:s.size] ** 2 + sol.fun[s.size:] ** 2))) * scale_v
    rel = rms / float(np.sqrt(np.mean(np.abs(v) ** 2)))
    order = np.argsort([md.fn_rpm for md in modes])
    return ModalFit(tuple(modes[i] for i in order), c0, c1, rms, rel, bool(sol.success),
                    str(sol.message))
