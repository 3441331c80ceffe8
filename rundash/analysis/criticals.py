"""Critical speeds from a 1X response versus speed: find, confirm, classify (pairing X/Y
and run directions in :mod:`rundash.analysis.critical_pairs`, readings at the top of a run
in :mod:`rundash.analysis.run_edges`; both importable from here).

Input is one probe and one run direction: shaft speeds in rpm and the slow-roll
compensated complex 1X phasors ``c`` of :mod:`rundash.conventions` (``|c|`` peak amplitude
in storage units, lag ``= conventions.lag_deg_from_phasor(c)``). Per-revolution data
(thousands of noisy points, speed not uniformly spaced, not monotonic at the ends) are
averaged as complex vectors into speed bins, then smoothed, before anything is read.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, replace
from typing import Literal

import numpy as np
from scipy import signal

from rundash.analysis.amplification import (
    HalfPower,
    Mode,
    PhaseAF,
    fit_modes,
    half_power,
    phase_af,
)
from rundash.errors import AnalysisError, SweepRateWarning, invalid_value

__all__ = ["Critical", "find_criticals", "CRITICALLY_DAMPED_AF", "QUASI_STEADY_RATIO",
           "CriticalPair", "combine_bearing", "compare_directions", "RisingAtTop",
           "rising_at_top", "first_candidate_rpm"]

Direction = Literal["run-up", "coast-down"]
Measure = Literal["displacement", "velocity", "acceleration"]
_INTEGRATIONS = {"displacement": 0, "velocity": 1, "acceleration": 2}
Classification = Literal["confirmed", "amplitude-only", "phase-only"]
Confidence = Literal["high", "medium", "low"]

#: AF below which a mode counts as critically damped (API 617 rule, from memory).
CRITICALLY_DAMPED_AF = 2.5
#: Default quasi-steady rule: the half-power band must take at least this many modal
#: decay times ``1/(zeta*omega_n)`` to cross (our own choice; see find_criticals).
QUASI_STEADY_RATIO = 20.0


@dataclass(frozen=True)
class Critical:
    """One critical speed (or candidate) of one probe in one run direction.

    Speeds in rpm; ``peak_amplitude`` in the caller's amplitude unit times
    ``amplitude_factor`` (e.g. um p-p); lags in degrees.

    Attributes
    ----------
    speed_rpm : float
        The reported critical speed; ``speed_basis`` says which one it is
        (``'amplitude peak'`` for peaks; for phase-only criticals ``'90 deg phase (modal
        fit)'``, the fitted natural frequency, or ``'90 deg phase'``, the measured
        crossing when no fit was usable).
    peak_speed_rpm, quadrature_speed_rpm : float or None
        Amplitude-peak speed and the speed where the lag is 90 deg above the mode's
        below-resonance baseline. Both are kept: they differ with damping (the
        unbalance-response peak sits at ``fn/sqrt(1-2 zeta^2)``, the 90 deg point at fn).
    peak_amplitude : float or None
    phase_change_deg : float
        Lag change across the peak band (about 180 deg for a lightly damped mode).
    lag_at_peak_deg : float or None
        Measured lag at the peak, wrapped to [0, 360).
    lag_above_baseline_deg : float or None
        Lag at the peak minus ``baseline_lag_deg`` (about 90 deg at a critical).
    baseline_lag_deg : float
        Below-resonance lag of the mode (from the modal fit when it succeeded, else the
        lag at the low edge of the band), wrapped to [0, 360).
    band_rpm : tuple of float
        Speed band used for phase, fit and sweep rate.
    half_power, phase_af, fit :
        The three AF estimates (:class:`HalfPower`, :class:`PhaseAF`, :class:`Mode`).
    af_governing, af_method, af_reason :
        The AF used for margins, which estimate it is and why.
    critically_damped : bool
        ``af_governing < critically_damped_af`` (2.5): no separation margin required.
    sweep_rate_rpm_s, sweep_decay_ratio, sweep_note :
        Speed rate through the band (signed), band crossing time over the modal decay
        time, and a note when the sweep is too fast for a quasi-steady reading.
    polar_loop : bool or None
        Whether the 1X vector traces a circular loop through the band.
    classification, confidence, evidence :
        ``'confirmed'`` | ``'amplitude-only'`` | ``'phase-only'``; ``'high'`` |
        ``'medium'`` | ``'low'``; plain sentences a reviewer can check.
    """

    speed_rpm: float
    speed_basis: str
    peak_speed_rpm: float | None
    quadrature_speed_rpm: float | None
    peak_amplitude: float | None
    phase_change_deg: float
    lag_at_peak_deg: float | None
    lag_above_baseline_deg: float | None
    baseline_lag_deg: float
    band_rpm: tuple[float, float]
    half_power: HalfPower | None
    phase_af: PhaseAF
    fit: Mode | None
    af_governing: float | None
    af_method: str
    af_reason: str
    critically_damped: bool
    sweep_rate_rpm_s: float | None
    sweep_decay_ratio: float | None
    sweep_note: str
    polar_loop: bool | None
    classification: str
    confidence: str
    evidence: tuple[str, ...]
    direction: str
    amplitude_factor: float


# --------------------------------------------------------------------------- preparation
@dataclass(frozen=True)
class _Curve:
    speed: np.ndarray  # uniform grid, rpm
    vector: np.ndarray  # smoothed complex phasor (|c| units)
    amp: np.ndarray  # amplitude_factor * |vector|
    lag: np.ndarray  # unwrapped lag, deg
    noise: np.ndarray  # 1-sigma noise of the smoothed amplitude per bin, amplitude_factor units
    floor: np.ndarray  # bound of the error the scatter does not show, per bin, same units
    smoothed: bool
    window_bins: int  # smoothing window in bins (1 when not smoothed)


def _bin(speed: np.ndarray, vector: np.ndarray, bin_rpm: float | None, floor=None):
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


def _prepare(speed, vector, amplitude_factor, bin_rpm, smooth_rpm, floor=None) -> _Curve:
    grid, v, count, sigma_point, w, fl = _bin(speed, vector, bin_rpm, floor)
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
        coeffs = signal.savgol_coeffs(n_win, 2)
        sig2 = np.convolve(np.pad(sig2, n_win // 2, mode="edge"), coeffs ** 2, mode="valid")
        v = signal.savgol_filter(v.real, n_win, 2) + 1j * signal.savgol_filter(v.imag, n_win, 2)
        fl = np.convolve(np.pad(fl, n_win // 2, mode="edge"), np.ones(n_win) / n_win, mode="valid")
    lag = np.degrees(np.unwrap(-np.angle(v)))
    return _Curve(grid, v, amplitude_factor * np.abs(v), lag, amplitude_factor * np.sqrt(sig2),
                  amplitude_factor * fl, smoothed, n_win if smoothed else 1)


def _band_edges(amp: np.ndarray, i: int, frac: float, tol: float) -> tuple[int, int]:
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


def _stall(curve: _Curve, i: int, hp: HalfPower, width_frac: float = 0.02,
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


def _polar_loop(v: np.ndarray) -> tuple[bool | None, str]:
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


def _sweep(speed, time_s, band, zeta, nc, ratio_min):
    if time_s is None:
        return None, None, ""
    m = (speed >= band[0]) & (speed <= band[1])
    if np.count_nonzero(m) < 3 or np.ptp(time_s[m]) <= 0:
        return None, None, "too few samples in the band to measure the sweep rate"
    rate = float(np.polyfit(time_s[m], speed[m], 1)[0])
    if rate == 0 or zeta is None or not zeta > 0:
        return rate, None, ""
    width = band[1] - band[0]
    t_band = width / abs(rate)
    tau = 1.0 / (zeta * 2 * math.pi * nc / 60.0)
    ratio = t_band / tau
    note = ""
    if ratio < ratio_min:
        note = (f"sweep too fast for a quasi-steady reading: the band ({width:.0f} rpm) is "
                f"crossed in {t_band:.2f} s, {ratio:.1f} modal decay times (rule: at least "
                f"{ratio_min:g}); " + _shift_words(rate) + " (F. M. Lewis, Trans. ASME, 1932)")
    return rate, ratio, note


def _shift_words(rate: float) -> str:
    """Which way a fast sweep moves the apparent reading (Lewis 1932): with the sweep.

    The peak moves in the sweep direction, so a run-up reads the critical high and a
    coast-down reads it low; the half-power AF is distorted either way (in SDOF sweeps
    integrated with scipy, fn 3000 rpm, zeta 0.05, the AF read 10.3 / 9.5 on run-ups at
    300 / 1000 rpm/s and 9.2 / 7.6 on coast-downs, against 9.90 steady).
    """
    if rate > 0:
        return ("on this run-up the apparent peak reads above the steady-state critical "
                "and its half-power AF is distorted (high or low)")
    return ("on this coast-down the apparent peak reads below the steady-state critical and "
            "its half-power AF is distorted (usually low)")


def _quadrature(curve: _Curve, lo: int, hi: int, base: float, near: float) -> float | None:
    s, rel = curve.speed[lo:hi + 1], curve.lag[lo:hi + 1] - base
    d = rel - 90.0
    idx = np.nonzero((d[:-1] < 0) & (d[1:] >= 0))[0]
    if idx.size == 0:
        return None
    xs = s[idx] + (s[idx + 1] - s[idx]) * (-d[idx]) / (d[idx + 1] - d[idx])
    return float(xs[np.argmin(np.abs(xs - near))])


def _fit_band(curve: _Curve, lo: int, hi: int, initial) -> Mode | None:
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


def _governing(hp: HalfPower | None, fit: Mode | None, pa: PhaseAF):
    if hp is not None and hp.determinable:
        return hp.af, "half-power", ("half-power bandwidth, the estimate API 684 and API 617 "
                                     "specify")
    why = hp.reason if hp is not None else "no amplitude peak"
    if fit is not None:
        return fit.af, "modal fit", f"{why}; modal-fit AF = 1/(2 zeta) used instead"
    if pa.af_45_135 is not None:
        return pa.af_45_135, "phase 45/135", f"{why}; no usable modal fit; 45/135 deg phase points used"
    if pa.af_slope is not None:
        return pa.af_slope, "phase slope", f"{why}; no usable modal fit; phase slope used"
    return None, "none", f"{why}; no other estimate available"


# --------------------------------------------------------------------------- main entry
def find_criticals(speed_rpm, vector, *, time_s=None, amplitude_factor: float = 2.0,
                   direction: Direction = "run-up", min_prominence: float = 0.05,
                   min_height: float = 0.05, phase_confirm_deg: float = 60.0,
                   bin_rpm: float | None = None, smooth_rpm: float | None = None,
                   critically_damped_af: float = CRITICALLY_DAMPED_AF,
                   quasi_steady_ratio: float = QUASI_STEADY_RATIO,
                   fit: bool = True, amplitude_floor=None,
                   measure: Measure = "displacement") -> tuple[Critical, ...]:
    """Find and classify the critical speeds in one probe's 1X response.

    Steps: (1) average the complex vectors into speed bins (``bin_rpm``) and smooth them
    (Savitzky-Golay, quadratic, ``smooth_rpm`` wide) when the data are noisy; (2) take
    amplitude peaks with :func:`scipy.signal.find_peaks` whose prominence is at least
    ``min_prominence`` of their height (and well above the noise) and whose height is at
    least ``min_height`` of the largest amplitude; (3) read the phase across each peak's
    band (between the speeds where the amplitude falls to 25 % of the peak, or the
    valleys, or the data ends): a change of at least ``phase_confirm_deg`` confirms the
    peak, otherwise it is ``'amplitude-only'`` (a structural resonance or a runout
    artefact is possible); (4) look for lag rises of 90 deg or more, away from any peak,
    as ``'phase-only'`` (heavily damped) criticals; (5) estimate the AF by half-power,
    phase and a one-mode fit, and choose the governing one; (6) check the polar loop and
    the sweep rate.

    The reported ``speed_rpm`` of a peak is the amplitude-peak speed, the basis of the
    API 684 half-power AF; the 90-deg-phase speed is kept as ``quadrature_speed_rpm``.

    Sweep-rate rule (our own choice, after the effect F. M. Lewis described): a reading is
    quasi-steady when crossing the half-power band takes at least ``quasi_steady_ratio``
    modal decay times ``1/(zeta*omega_n)``; this equals ``alpha <= 2 zeta^2 omega_n^2 /
    ratio`` for an angular acceleration ``alpha``. In SDOF sweeps integrated with
    :func:`scipy.integrate.solve_ivp` (zeta 0.02-0.1) the apparent peak moved by about
    19 % of the half-power bandwidth at ratio 10, 10 % at 20 and 7 % at 30, with the peak
    amplitude within 1-2 %; hence the default 20. Faster sweeps raise
    :class:`rundash.errors.SweepRateWarning` and a note on the critical.

    Parameters
    ----------
    speed_rpm : array_like, shape (n,)
        Shaft speed in rpm, any order (per revolution or per block).
    vector : array_like of complex, shape (n,)
        Slow-roll-compensated 1X phasors (see :mod:`rundash.conventions`).
    time_s : array_like, shape (n,), optional
        Time of each point in seconds from the record's start, for the sweep rate.
    amplitude_factor : float
        Amplitude reported = ``amplitude_factor * |c|``: 2.0 for p-p (proximity probes),
        1.0 for peak (velocity).
    direction : {'run-up', 'coast-down'}
        Run direction of this segment (a label; the data are analysed against speed).
    min_prominence, min_height : float
        Peak acceptance, fractions of the peak's own height and of the largest amplitude.
    phase_confirm_deg : float
        Lag change across the band that confirms a peak (with the lag at the peak 30 to
        170 deg above the baseline). A lightly damped isolated mode shows about 180 deg;
        a mode merged with a neighbour, whose band starts at the valley between them,
        shows less (73 deg at disk1_X of the two-disk reference rotor), hence 60.
    bin_rpm, smooth_rpm : float, optional
        Bin width and smoothing window in rpm; default automatic (bins: the data spacing
        or 1/4000 of the range; smoothing: 0.4 % of the top speed, only if the data are
        noisy; 0 disables smoothing).
    critically_damped_af : float
        Modes with a governing AF below this are critically damped (no margin required).
    quasi_steady_ratio : float
        See the sweep-rate rule above.
    fit : bool
        Run the one-mode fit per critical.
    amplitude_floor : float or array_like, shape (n,), optional
        A bound on the error of ``|c|`` per point that the scatter does not show because
        it does not average out between neighbouring revolutions, in the units of ``|c|``
        (before ``amplitude_factor``). For slow-roll-compensated vectors read against a
        sample-quantised tach it is the uncompensated amplitude times the angle
        uncertainty of the reference events in radians: an angle error rotates the
        measured vector but not the subtracted slow-roll vector. A peak must rise above
        its base by more than twice the floor (the bound at the peak and at its base);
        default none.
    measure : {'displacement', 'velocity', 'acceleration'}
        What the vectors measure. Velocity and acceleration are integrated to the
        displacement-equivalent 1X (divided by ``j omega`` once or twice) before anything
        is read: their extra factor of speed moves the peak up (closed form for an SDOF
        unbalance response, peak of ``r^3 / |1 - r^2 + 2 j zeta r|`` at
        ``r^2 = 2 - 4 zeta^2 - sqrt(1 - 16 zeta^2 + 16 zeta^4)``, against
        ``r^2 = 1 / (1 - 2 zeta^2)`` for displacement; 1.1 % apart at zeta 0.1), and the
        AF and the phase are the displacement response's. Reported amplitudes and lags
        stay those of the measured quantity at the peak speed.

    Returns
    -------
    tuple of Critical
        Sorted by speed; empty when the run shows no resonance.

    Warns
    -----
    SweepRateWarning
        When a band is crossed too fast for a quasi-steady reading.

    References
    ----------
    API RP 684, 2nd ed., 2005 (half-power AF, phase behaviour through a critical; from
    memory). F. M. Lewis, "Vibration during acceleration through a critical speed",
    Trans. ASME 54 (1932) 253-261.

    Examples
    --------
    >>> import numpy as np
    >>> n = np.linspace(300, 6000, 4000)
    >>> r = n / 3000
    >>> c = 5 * r**2 / (1 - r**2 + 0.1j * r)
    >>> crit, = find_criticals(n, c)
    >>> crit.classification, round(crit.peak_speed_rpm), round(crit.half_power.af, 1)
    ('confirmed', 3008, 9.9)
    """
    s = np.asarray(speed_rpm, dtype=float)
    v = np.asarray(vector, dtype=complex)
    if s.ndim != 1 or s.size < 20:
        raise AnalysisError(invalid_value("speed_rpm", f"shape {s.shape}", "a 1-D array of at least 20 speeds"))
    if v.shape != s.shape:
        raise AnalysisError(invalid_value("vector", f"shape {v.shape}", f"the shape of speed_rpm {s.shape}"))
    t = None
    if time_s is not None:
        t = np.asarray(time_s, dtype=float)
        if t.shape != s.shape:
            raise AnalysisError(invalid_value("time_s", f"shape {t.shape}", f"the shape of speed_rpm {s.shape}"))
    if direction not in ("run-up", "coast-down"):
        raise AnalysisError(invalid_value("direction", direction, "'run-up' or 'coast-down'"))
    if not amplitude_factor > 0:
        raise AnalysisError(invalid_value("amplitude_factor", amplitude_factor, "a positive factor (2.0 p-p, 1.0 peak)"))
    for name, val in (("min_prominence", min_prominence), ("min_height", min_height)):
        if not 0 <= val < 1:
            raise AnalysisError(invalid_value(name, val, "a fraction in [0, 1)"))
    floor = None
    if amplitude_floor is not None:
        floor = np.broadcast_to(np.asarray(amplitude_floor, dtype=float), s.shape) \
            if np.ndim(amplitude_floor) == 0 else np.asarray(amplitude_floor, dtype=float)
        if floor.shape != s.shape or not np.all(np.isfinite(floor) & (floor >= 0)):
            raise AnalysisError(invalid_value("amplitude_floor", f"shape {floor.shape}",
                                              f"finite values >= 0, a scalar or shape {s.shape}"))
    good = np.isfinite(s) & np.isfinite(v.real) & np.isfinite(v.imag) & (s > 0)
    if t is not None:
        good &= np.isfinite(t)
        t = t[good]
    s, v = s[good], v[good]
    if floor is not None:
        floor = floor[good]
    if s.size < 20 or np.ptp(s) <= 0:
        raise AnalysisError(invalid_value("speed_rpm", f"{s.size} finite points", "at least 20 finite points over a speed range"))
    if measure not in _INTEGRATIONS:
        raise AnalysisError(invalid_value("measure", measure, ", ".join(map(repr, _INTEGRATIONS))))
    k_int = _INTEGRATIONS[measure]
    if k_int:
        jw = (1j * 2.0 * math.pi * s / 60.0) ** k_int
        v = v / jw
        if floor is not None:
            floor = floor / np.abs(jw)
    found = _find(s, v, t, float(amplitude_factor), direction, min_prominence, min_height,
                  phase_confirm_deg, bin_rpm, smooth_rpm, critically_damped_af,
                  quasi_steady_ratio, fit, floor)
    if k_int:
        found = [_as_measured(c, k_int, measure) for c in found]
    for c in found:
        if c.sweep_note:
            warnings.warn(f"critical at {c.speed_rpm:.0f} rpm: {c.sweep_note}", SweepRateWarning,
                          stacklevel=2)
    return tuple(sorted(found, key=lambda c: c.speed_rpm))


def _as_measured(c: Critical, k: int, measure: str) -> Critical:
    """A critical found on the displacement-equivalent 1X, with the amplitudes and lags of
    the measured velocity (acceleration) at its speeds: x (j omega)^k, lag - 90 k deg."""
    def scale(rpm):
        return (2.0 * math.pi * rpm / 60.0) ** k

    hp = c.half_power
    pk = c.peak_speed_rpm if c.peak_speed_rpm is not None else c.speed_rpm
    if hp is not None:
        hp = replace(hp, peak_amplitude=hp.peak_amplitude * scale(hp.nc_rpm))
    shift = 90.0 * k
    return replace(
        c, half_power=hp,
        peak_amplitude=None if c.peak_amplitude is None else c.peak_amplitude * scale(pk),
        lag_at_peak_deg=None if c.lag_at_peak_deg is None else (c.lag_at_peak_deg - shift) % 360.0,
        baseline_lag_deg=(c.baseline_lag_deg - shift) % 360.0,
        evidence=c.evidence + (
            f"identified on the displacement-equivalent 1X (the {measure} vector divided by "
            f"{'j omega' if k == 1 else '(j omega)^2'}): the extra factor of speed in a {measure} "
            f"reading moves its own peak above the displacement peak; amplitude and lags "
            f"quoted as measured ({measure})",))


def _find(s, v, t, afac, direction, min_prominence, min_height, phase_confirm_deg, bin_rpm,
          smooth_rpm, critically_damped_af, quasi_steady_ratio, fit, floor) -> list[Critical]:
    curve = _prepare(s, v, afac, bin_rpm, smooth_rpm, floor)
    amp = curve.amp
    idx, props = signal.find_peaks(amp, prominence=1e-12 * amp.max())
    # significance: 8 noise sigmas of the smoothed curve, twice the floor
    keep = [(i, p) for i, p in zip(idx, props["prominences"])
            if p >= min_prominence * amp[i] and amp[i] >= min_height * amp.max()
            and p >= 8.0 * curve.noise[i] and p > 2.0 * curve.floor[i]]

    found: list[Critical] = []
    bands: list[tuple[float, float]] = []
    for i, _ in keep:
        found.append(_from_peak(curve, int(i), s, t, 8.0 * curve.noise[i], phase_confirm_deg, critically_damped_af,
                                quasi_steady_ratio, fit, direction, afac))
        bands.append(found[-1].band_rpm)
    found = _drop_beating(found)
    found.extend(_phase_only(curve, bands, s, t, critically_damped_af, quasi_steady_ratio, fit,
                             direction, afac))
    return found


def _from_peak(curve, i, s_raw, t_raw, tol, phase_confirm_deg, cd_af, ratio_min, do_fit,
               direction, afac) -> Critical:
    sp, amp, lag = curve.speed, curve.amp, curve.lag
    rel_tol = tol / amp[i] if amp[i] > 0 else 0.0
    hp = half_power(sp, amp, peak_index=i, rise_tolerance=rel_tol,
                    peak_fit_fraction=0.95 if curve.smoothed else None)
    if curve.smoothed and hp.determinable:
        side = _stall(curve, i, hp)
        if side:
            hp = HalfPower(None, hp.n1_rpm if side == "high" else None,
                           hp.n2_rpm if side == "low" else None, hp.nc_rpm, hp.peak_amplitude,
                           False, f"not determinable by half-power: {side} side merges with a "
                           f"neighbouring peak (the amplitude stalls on a plateau before "
                           f"falling to the half-power level)")
    lo, hi = _band_edges(amp, i, 0.25, tol)
    band = (float(sp[lo]), float(sp[hi]))
    evidence = [f"amplitude peak of {hp.peak_amplitude:.3g} at {hp.nc_rpm:.0f} rpm"]
    change = float(lag[hi] - lag[lo])
    mode = None
    if do_fit:
        z0 = 0.5 / hp.af if hp.af else 0.1
        mode = _fit_band(curve, lo, hi, (hp.nc_rpm * math.sqrt(max(1 - 2 * z0 * z0, 0.5)), z0))
    if mode is not None:
        base = float(-np.degrees(np.angle(mode.residue)))
        base_src = "the modal fit"
    else:
        base = float(lag[lo])
        base_src = "the low edge of the band"
    base = base + 360.0 * round((lag[lo] - base) / 360.0)
    if mode is not None and lag[lo] - base > 120:  # fit residue and band edge disagree wildly
        base = float(lag[lo])
        base_src = "the low edge of the band"
    lag_pk = float(np.interp(hp.nc_rpm, sp, lag))
    rel_pk = lag_pk - base
    quad = _quadrature(curve, lo, hi, base, hp.nc_rpm)
    if hi - lo >= 2:
        pa = phase_af(sp[lo:hi + 1], lag[lo:hi + 1], nc_rpm=quad or hp.nc_rpm, baseline_deg=base)
    else:
        pa = PhaseAF(None, None, None, None, None, None, None, base, "band too short")
    evidence.append(f"phase lag changes by {change:.0f} deg across the band "
                    f"{band[0]:.0f}-{band[1]:.0f} rpm")
    evidence.append(f"lag at the peak is {rel_pk:.0f} deg above the below-resonance baseline "
                    f"(baseline from {base_src})")
    if quad is not None:
        evidence.append(f"lag is 90 deg above the baseline at {quad:.0f} rpm")
    phase_ok = change >= phase_confirm_deg and 30.0 <= rel_pk <= 170.0
    classification = "confirmed" if phase_ok else "amplitude-only"
    if not phase_ok:
        evidence.append("the phase does not confirm a rotor critical: a structural resonance "
                        "or a runout artefact is possible")
    loop, loop_txt = _polar_loop(curve.vector[lo:hi + 1])
    if loop_txt:
        evidence.append(loop_txt)
    af, method, reason = _governing(hp, mode, pa)
    evidence.append(f"AF {af:.2f} by {method}" if af is not None else "AF not determinable")
    if not hp.determinable:
        evidence.append(hp.reason)
    zeta = mode.zeta if mode is not None else (0.5 / af if af else None)
    hb = (hp.n1_rpm, hp.n2_rpm) if hp.determinable else band
    rate, ratio, note = _sweep(s_raw, t_raw, hb, zeta, hp.nc_rpm, ratio_min)
    cd = _closing_evidence(evidence, rate, note, af, cd_af)
    confidence = _confidence(classification, loop, hp.determinable or mode is not None, note)
    return Critical(hp.nc_rpm, "amplitude peak", hp.nc_rpm, quad, hp.peak_amplitude, change,
                    float(lag_pk % 360.0), rel_pk, float(base % 360.0), band, hp, pa, mode,
                    af, method, reason, cd, rate, ratio, note, loop, classification,
                    confidence, tuple(evidence), direction, afac)


#: Decay times of the free vibration after a fast sweep within which a ripple of the 1X
#: on the sweep side of a critical is read as beating (our own choice: e^-5 = 0.7 %).
BEAT_DECAY_TIMES = 5.0


def _drop_beating(found: list[Critical]) -> list[Critical]:
    """Remove ripples that are post-resonance beating, not criticals.

    After a sweep too fast for a quasi-steady reading, the free vibration at the
    natural frequency outlasts the passage and beats with the 1X: the amplitude ripples
    on the sweep side of the critical (above it on a run-up, below on a coast-down)
    while the free vibration decays with ``exp(-zeta omega_n t)`` (F. M. Lewis, Trans.
    ASME 54, 1932). A peak without phase confirmation, lower than a confirmed critical
    whose sweep was too fast, on its sweep side, within the speed the sweep covers in
    :data:`BEAT_DECAY_TIMES` decay times beyond its band, is such a ripple: it is
    dropped and named in the critical's evidence.
    """
    out = list(found)
    for j, main in enumerate(found):
        if (main.classification != "confirmed" or not main.sweep_note
                or not main.sweep_rate_rpm_s or main.peak_amplitude is None):
            continue
        zeta = main.fit.zeta if main.fit is not None else (
            0.5 / main.af_governing if main.af_governing else None)
        if not zeta or zeta <= 0:
            continue
        sign = math.copysign(1.0, main.sweep_rate_rpm_s)
        wn = 2.0 * math.pi * main.speed_rpm / 60.0
        reach = abs(main.sweep_rate_rpm_s) * BEAT_DECAY_TIMES / (zeta * wn)
        edge = main.band_rpm[1] if sign > 0 else main.band_rpm[0]
        ripples = [c for c in out if c is not main and c.classification == "amplitude-only"
                   and c.peak_amplitude is not None and c.peak_amplitude < main.peak_amplitude
                   and 0 < sign * (c.speed_rpm - main.speed_rpm)
                   and sign * (c.speed_rpm - edge) <= reach]
        if not ripples:
            continue
        speeds = ", ".join(f"{c.speed_rpm:.0f}" for c in sorted(ripples, key=lambda c: c.speed_rpm))
        side = "above" if sign > 0 else "below"
        sentence = (f"the amplitude ripple at {speeds} rpm {side} it is post-resonance beating "
                    f"(the free vibration at the natural frequency, decaying over "
                    f"{1.0 / (zeta * wn):.2f} s, beats with the 1X after the fast sweep; "
                    f"F. M. Lewis, 1932), not a critical")
        k = out.index(main)
        out[k] = replace(main, evidence=main.evidence + (sentence,))
        out = [c for c in out if c not in ripples]
    return out


def _closing_evidence(evidence: list, rate, note: str, af, cd_af: float) -> bool:
    """Append the sweep-rate and critically-damped sentences; True when critically damped."""
    if rate is not None:
        evidence.append(f"sweep rate through the band {rate:+.1f} rpm/s")
    if note:
        evidence.append(note)
    cd = af is not None and af < cd_af
    if cd:
        evidence.append(f"AF below {cd_af:g}: critically damped, no separation margin required")
    return cd


def _confidence(classification, loop, af_known, sweep_note) -> str:
    if classification != "confirmed":
        return "low"
    score = int(bool(loop)) + int(bool(af_known)) + int(not sweep_note)
    return "high" if score == 3 else "medium"


def _phase_only(curve, bands, s_raw, t_raw, cd_af, ratio_min, do_fit, direction, afac):
    """Lag rises of >= 90 deg over a band with no prominent amplitude peak.

    The smoothed vectors where the amplitude is well above the noise are averaged into
    2 %-wide logarithmic speed bins; a contiguous rise of the bin lags (slope above a
    quarter of its steepest value) totalling at least 90 deg, clear of every peak band,
    is a phase-only critical.
    """
    sp, amp = curve.speed, curve.amp
    reliable = amp >= np.maximum(0.1 * amp.max(), 10 * curve.noise)
    if np.count_nonzero(reliable) < 12:
        return []
    s_ok, v_ok = sp[reliable], curve.vector[reliable]
    k = np.floor(np.log(s_ok / s_ok[0]) / math.log(1.02)).astype(int)
    cnt = np.bincount(k)
    filled = cnt > 0
    if np.count_nonzero(filled) < 8:
        return []
    vc = (np.bincount(k, v_ok.real) + 1j * np.bincount(k, v_ok.imag))[filled] / cnt[filled]
    nc_ = np.exp(np.bincount(k, np.log(s_ok))[filled] / cnt[filled])
    lag_c = np.degrees(np.unwrap(-np.angle(vc)))
    slope = np.gradient(lag_c, np.log(nc_))
    slope = np.convolve(np.pad(slope, 2, mode="edge"), np.ones(5) / 5, mode="valid")
    out = []
    order = np.argsort(slope)[::-1]
    taken = np.zeros(slope.size, bool)
    for i in order:
        if slope[i] < 60.0 or taken[i]:  # 60 deg per unit ln N: zeta up to about 1
            break
        lo = hi = i
        while lo > 0 and slope[lo - 1] > 0.25 * slope[i] and not taken[lo - 1]:
            lo -= 1
        while hi < slope.size - 1 and slope[hi + 1] > 0.25 * slope[i] and not taken[hi + 1]:
            hi += 1
        taken[lo:hi + 1] = True
        change = float(lag_c[hi] - lag_c[lo])
        band = (float(nc_[lo]), float(nc_[hi]))
        if change < 90.0 or any(band[0] <= b1 and band[1] >= b0 for b0, b1 in bands):
            continue
        j0, j1 = (int(np.searchsorted(sp, b)) for b in band)
        j1 = min(j1, sp.size - 1)
        mode = _fit_band(curve, j0, j1, (float(nc_[i]), 0.5)) if do_fit else None
        base = float(-np.degrees(np.angle(mode.residue))) if mode is not None else float(lag_c[lo])
        base = base + 360.0 * round((lag_c[lo] - base) / 360.0)
        rel = lag_c[lo:hi + 1] - base
        quad = None
        up = np.nonzero((rel[:-1] < 90.0) & (rel[1:] >= 90.0))[0]
        if up.size:
            q = int(up[0])
            quad = float(np.exp(np.interp(90.0, rel[q:q + 2], np.log(nc_[lo + q:lo + q + 2]))))
        nc = quad if quad is not None else float(nc_[i])
        basis = "90 deg phase"
        if mode is not None:
            # the fitted mode's 90 deg point is fn, unaffected by the constant left by
            # slow-roll compensation that shifts a slowly rising measured lag
            nc, basis = mode.fn_rpm, "90 deg phase (modal fit)"
        pa = phase_af(nc_[lo:hi + 1], lag_c[lo:hi + 1], nc_rpm=nc, baseline_deg=base) \
            if hi - lo >= 2 else PhaseAF(None, None, None, None, None, None, None, base, "band too short")
        af, method, reason = _governing(None, mode, pa)
        zeta = mode.zeta if mode is not None else (0.5 / af if af else None)
        rate, ratio, note = _sweep(s_raw, t_raw, band, zeta, nc, ratio_min)
        ev = [f"phase lag rises by {change:.0f} deg over {band[0]:.0f}-{band[1]:.0f} rpm with no "
              f"prominent amplitude peak: a heavily damped critical",
              f"measured lag is 90 deg above the baseline at {quad:.0f} rpm" if quad is not None
              else f"steepest lag rise at {float(nc_[i]):.0f} rpm",
              f"modal fit: natural frequency {mode.fn_rpm:.0f} rpm, damping ratio {mode.zeta:.2f}"
              if mode is not None else "no usable modal fit",
              f"AF {af:.2f} by {method}" if af is not None else "AF not determinable"]
        cd = _closing_evidence(ev, rate, note, af, cd_af)
        out.append(Critical(nc, basis, None, quad, None, change, None, None,
                            float(base % 360.0), band, None, pa, mode, af, method, reason, cd,
                            rate, ratio, note, None, "phase-only", "low", tuple(ev), direction,
                            afac))
        bands = [*bands, band]
    return out


# --------------------------------------------------------------------------- comparisons


# pairing and the edges of a run, importable from here as before the split
from rundash.analysis.critical_pairs import (  # noqa: E402
    CriticalPair, combine_bearing, compare_directions,
)
from rundash.analysis.run_edges import RisingAtTop, first_candidate_rpm, rising_at_top  # noqa: E402
