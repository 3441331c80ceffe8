"""Speed profile: a smooth model of shaft angle against time, and run segmentation.

The shaft angle ``theta(t)`` (revolutions since the first once-per-rev event, see
:mod:`rundash.conventions`) is a cubic spline through the reference events
``theta(t_k) = k``: a not-a-knot cubic spline when it is monotone (checked exactly on
every interval: its derivative, a quadratic, is positive at both ends and at an
interior vertex), otherwise a monotone piecewise cubic Hermite interpolant (PCHIP); the
profile says which in ``model``. Speed is ``60 dtheta/dt`` in rpm. Angles at sample
times are a direct polynomial evaluation; :meth:`SpeedProfile.time_at_angle` inverts it
by Newton iterations.

Why angle against time rather than time against angle: both are monotone cubics through
the same points, but time against angle behaves like a square root at low speed under
hard acceleration and a cubic follows it poorly. Measured on a 300 rpm start at
500 rpm/s: time-against-angle spline 2 % speed error (0.5 % at the 99th percentile);
angle against time exact to rounding (a constant acceleration makes the angle a
quadratic in time, which a not-a-knot cubic reproduces), and below 2e-6 of rpm on the
non-linear sweeps of tests/dsp/test_speed.py (requirement 0.05 %). A piecewise-linear
angle (constant speed over each revolution) is off by up to a third there.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

import numpy as np
from scipy.interpolate import CubicSpline, PchipInterpolator
from scipy.linalg import LinAlgError, solveh_banded

from rundash.dsp.tach_quality import MAX_JITTER_DEG, local_jitter_s, timing_jitter
from rundash.errors import DspError, TachError, invalid_value

__all__ = ["SpeedProfile", "speed_profile", "fit_event_times", "Segment", "segment", "run_kind"]

_NEWTON_ITERATIONS = 4  # for time_at_angle

#: Rms event jitter of the worst tenth of the events, as a fraction of a revolution,
#: above which ``fit="auto"`` fits the event times instead of interpolating them: the
#: jitter the tach-quality check calls large (0.5 deg, :data:`tach.MAX_JITTER_DEG`).
#: Below it an interpolated speed scatters by under 0.2 % from one revolution to the next.
FIT_JITTER_REV = MAX_JITTER_DEG / 360.0
# The fit's ends are held to the first and last two events (weight 10: a penalised fit
# is free at its ends, where a hard start has its largest third differences), and events
# left more than two jitters away are weighted up until the fit follows them (measured
# on a 60 rpm start at 2000 rpm/s read at 5 kHz: first-revolution speed error 1 %, raw
# interpolation 4 %).
_END_WEIGHT = 10.0
_FOLLOW_JITTERS = 2.0
_LAMBDA_MAX = 1e12  # smoothing window of at most about 2 pi lambda^(1/6) = 630 revolutions


def _whittaker(t: np.ndarray, lam: float, w: np.ndarray | None = None) -> np.ndarray:
    """Whittaker-Henderson smoothing with third differences: the ``u`` minimising
    ``sum w (u - t)^2 + lam |D3 u|^2``, as ``t - W^-1 D3' z`` with
    ``(I/lam + D3 W^-1 D3') z = D3 t`` (a banded solve on the small third differences,
    well conditioned for large lam). The work arrays are made in place (the banded
    matrix in LAPACK's column order, solved where it lies): a few arrays of the events'
    size, not a dozen."""
    m = t.size - 3
    a = (-1.0, 3.0, -3.0, 1.0)
    d3 = t[3:] - 3.0 * t[2:-1]
    d3 += 3.0 * t[1:-2]
    d3 -= t[:-3]
    ab = np.zeros((4, m), order="F")
    if w is None:
        ab[0], ab[1], ab[2], ab[3] = -1.0, 6.0, -15.0, 20.0
        iw = None
    else:
        iw = 1.0 / w
        for lag in range(4):  # (D W^-1 D')(i, i + lag) = sum_p a[p] a[p - lag] / w[i + p]
            band = np.zeros(m - lag)
            for p in range(lag, 4):
                band += a[p] * a[p - lag] * iw[p:p + m - lag]
            ab[3 - lag, lag:] = band
            del band
    ab[3] += 1.0 / lam
    z = solveh_banded(ab, d3, overwrite_ab=True, overwrite_b=True, check_finite=False)
    del ab, d3
    r = np.zeros(t.size)
    r[:m] -= z
    r[1:m + 1] += 3.0 * z
    r[2:m + 2] -= 3.0 * z
    r[3:] += z
    del z
    if iw is not None:
        r *= iw
    np.subtract(t, r, out=r)
    return r


def fit_event_times(rev_times_s, jitter_s) -> tuple[np.ndarray, float]:
    """Once-per-rev event times fitted through their timing jitter.

    A shaft cannot change speed from one revolution to the next as jittered events
    suggest; the events are fitted (not interpolated) by Whittaker-Henderson smoothing
    of time against revolution number with a third-difference penalty, which leaves
    any locally constant angular acceleration (time quadratic in angle) untouched. Each
    event is weighted by the inverse square of its jitter (a sample-quantised edge
    jitters by a fixed time, so a record from 200 to 6000 rpm holds events of very
    different quality). The smoothing weight follows the discrepancy principle: the
    robust rms of the residuals in jitters (1.4826 x the median absolute value) is one
    (bisection on log lambda; lambda at most 1e12). Where the speed truly changes
    faster than the fit follows (a hard start, a trip), residuals beyond two jitters get
    their events weighted up until the fit follows them; the first and last two events
    are weighted up from the start.

    Parameters
    ----------
    rev_times_s : array_like, shape (n,)
    jitter_s : float or array_like, shape (n,)
        Rms timing jitter in s, one for all events or per event
        (:func:`rundash.dsp.tach.local_jitter_s`).

    Returns
    -------
    (fitted_times_s, lam)
        ``lam`` is 0 when no fit was made (too few events, or the fitted times would
        not increase).

    References
    ----------
    E. T. Whittaker, "On a new method of graduation", Proc. Edinburgh Math. Soc. 41
    (1923) 63-75. V. A. Morozov, "On the solution of functional equations by the method
    of regularization", Soviet Math. Dokl. 7 (1966) 414-417 (discrepancy principle).
    """
    t = np.asarray(rev_times_s, dtype=np.float64).ravel()
    sig = np.broadcast_to(np.asarray(jitter_s, dtype=np.float64), t.shape).copy() \
        if np.ndim(jitter_s) == 0 or np.size(jitter_s) == t.size else None
    if t.size < 8 or sig is None or not np.all(np.isfinite(sig)):
        return t, 0.0
    ref = float(np.max(sig))
    if not ref > 0:
        return t, 0.0
    # weights from 1 (the worst events) to 400 (events 20 times steadier or better):
    # bounded, so the banded solve stays well conditioned
    sig = np.maximum(sig, 0.05 * ref)
    base = (ref / sig) ** 2
    t0 = t[0]
    tc = t - t0  # the banded solve works on differences; keep the numbers small anyway
    lo, hi = -2.0, math.log10(_LAMBDA_MAX)
    best = None
    try:
        for _ in range(18):
            mid = 0.5 * (lo + hi)
            u = _whittaker(tc, 10.0 ** mid, base)
            if 1.4826 * float(np.median(np.abs(u - tc) / sig)) > 1.0:
                hi = mid
            else:
                lo, best = mid, u
            if hi - lo < 0.05:
                break
        if best is not None:
            w = base.copy()
            w[:2] *= _END_WEIGHT
            w[-2:] *= _END_WEIGHT
            best = _whittaker(tc, 10.0 ** lo, w)
            for _ in range(8):
                big = np.abs(best - tc) / (_FOLLOW_JITTERS * sig)
                if not np.any(big > 1.0):
                    break
                w = np.where(big > 1.0, big * big * w, w)
                best = _whittaker(tc, 10.0 ** lo, w)
    except (LinAlgError, ValueError):
        return t, 0.0
    if best is None or np.any(np.diff(best) <= 0):
        return t, 0.0
    return best + t0, 10.0 ** lo


#: Revolutions per piece of the work over every revolution (the spline's coefficients,
#: the segmentation's running sums), and the knots each spline piece's solve reaches
#: beyond it on either side. The not-a-knot spline is one global tridiagonal solve, but
#: its matrix is diagonally dominant (diagonal 2 (h_i + h_(i+1)), off-diagonals h_i and
#: h_(i+1)), so a knot's influence falls by at least half per knot (about 0.27 on even
#: knots): 64 knots of overlap leave a piece's coefficients within rounding of the whole
#: solve's (checked in tests/dsp/test_speed.py), with work arrays of one piece instead of
#: the whole record (a 2-hour run holds 740 000 revolutions). PCHIP is local (three knots)
#: and is the same to the bit.
_PIECE_REVS = 1 << 16
_SPLINE_OVERLAP = 64


def _piecewise_coefficients(t: np.ndarray, model: str) -> tuple[np.ndarray, str]:
    """The cubic, quadratic and linear coefficients (scipy's layout, shape (3, n - 1)) of
    the spline of angle against the times ``t``, computed piece by piece (the constant
    term of interval k is k itself, exactly, and is not stored); ``model`` is the one
    used (``'cubic'`` falls back to ``'pchip'`` when any piece falls)."""
    n = t.size
    c = np.empty((3, n - 1))
    for a in range(0, n - 1, _PIECE_REVS):
        b = min(a + _PIECE_REVS, n - 1)  # intervals a .. b - 1
        lo, hi = max(a - _SPLINE_OVERLAP, 0), min(b + 1 + _SPLINE_OVERLAP, n)
        k = np.arange(hi - lo, dtype=np.float64)  # steps of exactly 1: the same slopes
        if model == "cubic":
            spline = CubicSpline(t[lo:hi], k, bc_type="not-a-knot")
            if not _monotone(spline.c[:, a - lo:b - lo], np.diff(t[a:b + 1])):
                return _piecewise_coefficients(t, "pchip")
        else:
            spline = PchipInterpolator(t[lo:hi], k)
        c[:, a:b] = spline.c[:3, a - lo:b - lo]
    return c, model


def _monotone(c: np.ndarray, h: np.ndarray) -> bool:
    """True when every cubic piece ``c`` (scipy layout, local variable in [0, h]) rises."""
    a3, a2, a1 = 3.0 * c[0], 2.0 * c[1], c[2]
    # derivative a3 s^2 + a2 s + a1 on [0, h]: check ends and the interior vertex
    if np.any(a1 <= 0) or np.any((a3 * h + a2) * h + a1 <= 0):
        return False
    with np.errstate(divide="ignore", invalid="ignore"):
        uv = -a2 / (2.0 * a3)
    inside = (a3 > 0) & (uv > 0) & (uv < h)
    dmin = a1[inside] - a2[inside] ** 2 / (4.0 * a3[inside])
    return bool(np.all(dmin > 0))


class SpeedProfile:
    """Shaft angle and speed against time from once-per-rev reference events.

    Build with :func:`speed_profile`. Angles are in revolutions (0 at the first event),
    speeds in rpm, times in s (see :mod:`rundash.conventions`). Outside
    ``[t_start, t_end]`` angle and speed are NaN.
    """

    __slots__ = ("_t", "_c", "model", "_measured", "jitter_s", "jitter_deg",
                 "fit_lambda", "worst_jitter_deg")

    def __init__(self, rev_times_s: np.ndarray, model: Literal["cubic", "pchip"] = "cubic", *,
                 measured_s: np.ndarray | None = None, jitter: tuple[float, float] | None = None,
                 fit_lambda: float = 0.0, worst_jitter_deg: float | None = None):
        t = np.asarray(rev_times_s, dtype=np.float64)
        self._t = t
        # the coefficients alone are kept (not a spline object), computed in pieces
        self._c, self.model = _piecewise_coefficients(t, model)
        self._measured = t if measured_s is None else measured_s
        #: estimated rms timing jitter of the measured events, s and deg of rotation
        self.jitter_s, self.jitter_deg = jitter if jitter is not None else (None, None)
        #: smoothing weight of the fit through the events (0: interpolated)
        self.fit_lambda = float(fit_lambda)
        #: rms jitter of the worst tenth of the events, degrees of rotation
        self.worst_jitter_deg = worst_jitter_deg

    @property
    def fitted(self) -> bool:
        """True when the events were fitted through their jitter, not interpolated."""
        return self.fit_lambda > 0

    @property
    def measured_rev_times_s(self) -> np.ndarray:
        """The once-per-rev event times as measured (a copy); ``rev_times_s`` are the
        fitted ones when :attr:`fitted`."""
        return self._measured.copy()

    @property
    def note(self) -> str:
        """What the model did with the events, in words (empty when interpolated)."""
        if not self.fitted:
            return ""
        rms = float(np.sqrt(np.mean((self._t - self._measured) ** 2)))
        worst = self.worst_jitter_deg if self.worst_jitter_deg is not None else self.jitter_deg
        return (f"speed model fitted through the tach event jitter (up to {worst:.2f} deg of "
                f"rotation rms), not interpolated: events moved by {1e6 * rms:.1f} us rms")

    def __repr__(self) -> str:
        return (f"SpeedProfile({self.n_revs} revs, {self.t_start:.3f}-{self.t_end:.3f} s, "
                f"model={self.model!r})")

    @property
    def rev_times_s(self) -> np.ndarray:
        """Once-per-rev reference event times in s (a copy)."""
        return self._t.copy()

    @property
    def t_start(self) -> float:
        """Time in s of the first reference event (angle 0)."""
        return float(self._t[0])

    @property
    def t_end(self) -> float:
        """Time in s of the last reference event (angle ``n_revs``)."""
        return float(self._t[-1])

    @property
    def n_revs(self) -> int:
        """Whole revolutions covered."""
        return int(self._t.size - 1)

    def angle_rev(self, t) -> np.ndarray:
        """Shaft angle in revolutions since the first reference event at time(s) ``t`` s."""
        t = np.asarray(t, dtype=np.float64)
        return self._angle(t.ravel(), extrapolate=False).reshape(t.shape)

    def _piece(self, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        k = np.searchsorted(self._t, t, side="right") - 1
        np.clip(k, 0, self.n_revs - 1, out=k)
        return k, t - self._t[k]

    def _angle(self, t: np.ndarray, *, extrapolate: bool, sorted_t: bool = False) -> np.ndarray:
        """Angle at 1-D times; with ``extrapolate`` the end cubics are extended by up to
        half a revolution beyond the first and last events (order tracking uses this for
        the interpolation weights at the record's ends). ``sorted_t``: t is increasing."""
        c = self._c
        if sorted_t:
            # increasing times: repeat each revolution's coefficients over its samples
            cuts = np.searchsorted(t, self._t[1:-1], side="right")
            counts = np.diff(np.concatenate([[0], cuts, [t.size]]))
            s = t - np.repeat(self._t[:-1], counts)
            u = np.repeat(c[0], counts)
            u *= s
            u += np.repeat(c[1], counts)
            u *= s
            u += np.repeat(c[2], counts)
            u *= s
            u += np.repeat(np.arange(self.n_revs, dtype=np.float64), counts)  # the integer angle
        else:
            k, s = self._piece(t)
            u = ((c[0, k] * s + c[1, k]) * s + c[2, k]) * s
            u += k  # the exact integer angle at the interval's event
        if extrapolate:
            u[(u < -0.5) | (u > self.n_revs + 0.5)] = np.nan
        else:
            u[(t < self._t[0]) | (t > self._t[-1])] = np.nan
        return u

    def rpm(self, t) -> np.ndarray:
        """Shaft speed in rpm at time(s) ``t`` s: 60 dtheta/dt."""
        t = np.asarray(t, dtype=np.float64)
        flat = t.ravel()
        k, s = self._piece(flat)
        c = self._c
        out = 60.0 * ((3.0 * c[0, k] * s + 2.0 * c[1, k]) * s + c[2, k])
        out[(flat < self._t[0]) | (flat > self._t[-1])] = np.nan
        return out.reshape(t.shape)

    def time_at_angle(self, angle_rev) -> np.ndarray:
        """Time in s at shaft angle(s) in revolutions (inverse of :meth:`angle_rev`)."""
        a = np.asarray(angle_rev, dtype=np.float64)
        flat = a.ravel()
        k = np.clip(np.floor(flat).astype(np.int64), 0, self.n_revs - 1)
        k[~np.isfinite(flat)] = 0
        c = self._c
        h = self._t[k + 1] - self._t[k]
        s = (flat - k) * h
        for _ in range(_NEWTON_ITERATIONS + 2):
            f = ((c[0, k] * s + c[1, k]) * s + c[2, k]) * s + k - flat
            df = (3.0 * c[0, k] * s + 2.0 * c[1, k]) * s + c[2, k]
            s = np.clip(s - f / df, 0.0, h)
        out = self._t[k] + s
        out[~((flat >= 0) & (flat <= self.n_revs))] = np.nan
        return out.reshape(a.shape)

    def rpm_at_angle(self, angle_rev) -> np.ndarray:
        """Shaft speed in rpm at shaft angle(s) in revolutions."""
        return self.rpm(self.time_at_angle(angle_rev))


def speed_profile(rev_times_s, *, model: Literal["cubic", "pchip"] = "cubic",
                  fit: Literal["auto", "never", "always"] = "auto",
                  jitter_floor_s: float = 0.0) -> SpeedProfile:
    """Speed profile from once-per-rev reference event times.

    Parameters
    ----------
    rev_times_s : array_like, shape (n_revs + 1,)
        Reference event times in s, strictly increasing, at least 5 (4 revolutions),
        e.g. :attr:`rundash.dsp.OncePerRev.times_s`.
    model : {'cubic', 'pchip'}
        ``'cubic'``: not-a-knot cubic spline of time against angle, used when monotone
        (else PCHIP, reported in ``SpeedProfile.model``); ``'pchip'``: always PCHIP.
    fit : {'auto', 'never', 'always'}
        Whether the spline goes through the events as measured or through times fitted
        through their timing jitter (:func:`fit_event_times`, with the jitter of
        :func:`rundash.dsp.tach.local_jitter_s`). ``'auto'`` fits when the rms jitter
        of the worst tenth of the events exceeds :data:`FIT_JITTER_REV` of a revolution: sample-quantised edges (a sharp
        notch at a low sample rate) or a noisy tach, where interpolating each event
        would turn the jitter into speed and phase swings the shaft cannot make.
    jitter_floor_s : float
        The least rms jitter of any event in the fit, in s (whether to fit is decided
        from the jitter measured). A tach edge the sample grid does not
        resolve (:attr:`rundash.dsp.tach.TachQuality.quantised`) puts each event
        anywhere within its sample: ``1 / (sqrt(12) fs)`` rms, though while a revolution
        lasts nearly a whole number of samples the error drifts so slowly that its
        third differences do not show it.

    Returns
    -------
    SpeedProfile

    Examples
    --------
    >>> import numpy as np
    >>> p = speed_profile(np.arange(11) * 0.02)      # 3000 rpm, 10 revolutions
    >>> float(np.round(p.rpm(0.1), 6)), float(np.round(p.angle_rev(0.05), 9))
    (3000.0, 2.5)
    """
    t = np.asarray(rev_times_s, dtype=np.float64).ravel()
    if model not in ("cubic", "pchip"):
        raise DspError(invalid_value("model", model, "'cubic' or 'pchip'"))
    if fit not in ("auto", "never", "always"):
        raise DspError(invalid_value("fit", fit, "'auto', 'never' or 'always'"))
    if t.size < 5:
        raise TachError(
            f"Too few once-per-rev events for a speed profile: {t.size} (need at least 5, "
            "i.e. 4 revolutions)")
    if not np.all(np.isfinite(t)) or np.any(np.diff(t) <= 0):
        raise TachError(invalid_value("rev_times_s", "non-increasing or non-finite times",
                                      "strictly increasing finite times in s"))
    jit = timing_jitter(t)
    fitted, lam, worst_rev = t, 0.0, None
    if not (np.isfinite(jitter_floor_s) and jitter_floor_s >= 0):
        raise DspError(invalid_value("jitter_floor_s", jitter_floor_s, "a time >= 0 in s"))
    if jit is not None:
        local = local_jitter_s(t)
        # whether to fit: the measured jitter, in revolutions, of the worst tenth of the
        # events (quantisation grows with speed); how: each event's jitter, no less than
        # the floor
        worst_rev = float(np.percentile(local[1:] / np.diff(t), 90.0))
        if fit == "always" or (fit == "auto" and worst_rev > FIT_JITTER_REV):
            fitted, lam = fit_event_times(t, np.maximum(local, jitter_floor_s))
    return SpeedProfile(fitted, model, measured_s=t, jitter=jit, fit_lambda=lam,
                        worst_jitter_deg=None if worst_rev is None else 360.0 * worst_rev)


@dataclass(frozen=True)
class Segment:
    """A part of a record with one kind of speed change. Times in s, speeds in rpm."""

    kind: Literal["run-up", "coast-down", "steady"]
    t_start_s: float
    t_end_s: float
    rpm_start: float
    rpm_end: float


def _windowed_slope(rev_times_s: np.ndarray, tg: np.ndarray, window_s: float,
                    clip_s: tuple[np.ndarray, np.ndarray] | None = None) -> np.ndarray:
    """Least-squares slope (rpm/s) of per-revolution mean speed within +-window/2 of tg
    (and, with ``clip_s = (t_from, t_to)`` per grid point, within those times)."""
    rt = np.asarray(rev_times_s, dtype=np.float64)
    tm = 0.5 * (rt[1:] + rt[:-1])
    lo = np.searchsorted(tm, tg - window_s / 2, side="left")
    hi = np.searchsorted(tm, tg + window_s / 2, side="right")
    if clip_s is not None:
        lo = np.maximum(lo, np.searchsorted(tm, clip_s[0], side="left"))
        hi = np.minimum(hi, np.searchsorted(tm, clip_s[1], side="right"))
    # at least 3 revolutions per window (slow speeds): widen to the nearest ones
    short = hi - lo < 3
    if np.any(short):
        mid = np.clip(np.searchsorted(tm, tg[short]), 1, tm.size - 2)
        lo[short] = np.maximum(mid - 1, 0)
        hi[short] = np.minimum(mid + 2, tm.size)
    # sums over each window of tc, r, tc^2 and tc r (tc the times centred on the record,
    # for conditioning; r the revolution's mean speed) from cumulative sums read at the
    # windows' ends only, accumulated piece by piece with the running sums carried (the
    # same sequential sums as over the whole record, without arrays of every revolution)
    centre = tm.mean()
    idx = np.concatenate([lo, hi])
    at = np.empty((4, idx.size))
    carry = np.zeros(4)
    m = tm.size
    for a in range(0, m, _PIECE_REVS):
        b = min(a + _PIECE_REVS, m)
        tc = tm[a:b] - centre
        r = 60.0 / np.diff(rt[a:b + 1])
        sel = np.flatnonzero((idx >= a) & (idx <= b))
        for j, v in enumerate((tc, r, tc * tc, tc * r)):
            cs = np.cumsum(np.concatenate([carry[j:j + 1], v]))  # sums before a .. b
            at[j, sel] = cs[idx[sel] - a]
            carry[j] = cs[-1]
    n = (hi - lo).astype(np.float64)
    st, sr, stt, str_ = (x[lo.size:] - x[:lo.size] for x in at)
    den = n * stt - st * st
    with np.errstate(invalid="ignore", divide="ignore"):
        slope = np.where(den > 0, (n * str_ - st * sr) / den, 0.0)
    return slope


def _refine_boundaries(runs: list, acc: np.ndarray, tg: np.ndarray, window_s: float) -> None:
    """Move each moving/steady boundary to where |acceleration| crosses half the moving
    run's median: a windowed slope ramps across a corner symmetrically, so its half-way
    point is the corner itself (the threshold crossing lags it by up to half a window)."""
    step = tg[1] - tg[0]
    reach = int(np.ceil(window_s / step))
    for k in range(len(runs) - 1):
        a, b = runs[k], runs[k + 1]
        if (a[0] == 0) == (b[0] == 0):
            continue  # steady-steady cannot happen; moving-moving: the sign change is right
        moving = a if a[0] != 0 else b
        level = 0.5 * float(np.median(np.abs(acc[moving[1]:moving[2]])))
        j0 = b[1]
        lo, hi = max(a[1] + 1, j0 - reach), min(b[2] - 1, j0 + reach)
        if hi <= lo:
            continue
        seg = np.abs(acc[lo:hi + 1]) > level
        # moving before steady: last point above the level; steady before moving: first
        idx = np.flatnonzero(seg)
        if idx.size == 0:
            continue
        j = lo + (int(idx[-1]) + 1 if a[0] != 0 else int(idx[0]))
        if a[1] < j < b[2]:
            a[2] = j
            b[1] = j


def _merge_short(runs: list, tg: np.ndarray, min_duration_s: float) -> None:
    """Merge runs shorter than ``min_duration_s`` into their longer neighbour, shortest
    first, and join equal neighbours (in place)."""
    n = tg.size
    while len(runs) > 1:
        dur = [tg[min(e, n - 1)] - tg[s] for _, s, e in runs]
        i = int(np.argmin(dur))
        if dur[i] >= min_duration_s:
            break
        if i == 0:
            j = 1
        elif i == len(runs) - 1:
            j = i - 1
        else:
            j = i - 1 if dur[i - 1] >= dur[i + 1] else i + 1
        lo, hi = min(i, j), max(i, j)
        runs[lo] = [runs[j][0], runs[lo][1], runs[hi][2]]
        del runs[hi]
        _join_equal(runs)


def _join_equal(runs: list) -> None:
    k = 0
    while k < len(runs) - 1:
        if runs[k][0] == runs[k + 1][0]:
            runs[k][2] = runs[k + 1][2]
            del runs[k + 1]
        else:
            k += 1


def _runs(code: np.ndarray) -> list:
    starts = np.concatenate([[0], np.flatnonzero(np.diff(code)) + 1])
    ends = np.concatenate([starts[1:], [code.size]])
    return [[int(code[s]), int(s), int(e)] for s, e in zip(starts, ends)]


def _slow_sweeps(runs: list, profile: SpeedProfile, tg: np.ndarray, rpm: np.ndarray,
                 steady_tol_pct: float, hold_window_s: float) -> np.ndarray:
    """Codes per grid point after looking into the steady runs for slow sweeps.

    A steady run whose speed range exceeds ``steady_tol_pct`` of its mean is examined
    with the least-squares slope over ``hold_window_s`` (clipped to the run, so the
    ramps beside it do not leak in): where the speed would change by more than
    ``steady_tol_pct`` within ``hold_window_s``, the machine is sweeping, however
    slowly (0.7 rpm/s at 1000 rpm is 4 % a minute).
    """
    n = tg.size
    code = np.concatenate([np.full(e - s, c) for c, s, e in runs])
    for c, s, e in runs:
        if c != 0:
            continue
        seg = rpm[s:e]
        if e - s < 3 or np.ptp(seg) <= steady_tol_pct / 100.0 * np.mean(seg):
            continue
        t_from = np.full(e - s, tg[s])
        t_to = np.full(e - s, tg[min(e, n - 1)])
        acc = _windowed_slope(profile._t, tg[s:e], hold_window_s, (t_from, t_to))
        moving = np.abs(acc) * hold_window_s > steady_tol_pct / 100.0 * seg
        code[s:e] = np.where(moving, np.sign(acc), 0).astype(code.dtype)
    return code


def segment(
    profile: SpeedProfile,
    *,
    steady_tol_rpm_s: float = 10.0,
    min_duration_s: float = 2.0,
    smooth_s: float = 2.0,
    steady_tol_pct: float = 1.0,
    hold_window_s: float = 60.0,
) -> tuple[Segment, ...]:
    """Split a record into run-up, coast-down and steady segments.

    The acceleration at each point of a grid (every ``smooth_s / 4`` s) is the slope of a
    least-squares line through the per-revolution mean speeds (60 / revolution time)
    within ``smooth_s`` around it: it averages over every revolution in the window, so a
    tach quantised to whole samples (a square TTL pulse, no edge to interpolate) gives a
    steady slope even at high speed. Points whose acceleration magnitude is at most
    ``steady_tol_rpm_s`` are steady, others run-up or coast-down by sign. A steady
    stretch is then held to a relative rule: it stays steady only where its speed
    changes by at most ``steady_tol_pct`` % within ``hold_window_s`` (slope over that
    window, within the stretch), so a slow run-up (0.7 rpm/s over an hour) is a run-up,
    not a hold. Runs shorter than ``min_duration_s`` are merged into the longer
    neighbour (common practice, no source).

    Parameters
    ----------
    profile : SpeedProfile
    steady_tol_rpm_s : float
        Largest |acceleration| in rpm/s that may be steady (over ``smooth_s``).
    min_duration_s : float
        Shortest segment kept, in s.
    smooth_s : float
        Window of the acceleration estimate, in s.
    steady_tol_pct, hold_window_s : float
        Largest speed change, % of the speed, within ``hold_window_s`` s still steady.

    Returns
    -------
    tuple of Segment, in time order, covering ``[profile.t_start, profile.t_end]``.
    """
    for name, v in (("steady_tol_rpm_s", steady_tol_rpm_s), ("min_duration_s", min_duration_s),
                    ("smooth_s", smooth_s), ("steady_tol_pct", steady_tol_pct)):
        if not (np.isfinite(v) and v >= 0):
            raise DspError(invalid_value(name, v, "a non-negative number"))
    if not (np.isfinite(hold_window_s) and hold_window_s > 0):
        raise DspError(invalid_value("hold_window_s", hold_window_s, "a positive time in s"))
    t0, t1 = profile.t_start, profile.t_end
    dt = max(smooth_s / 4.0, (t1 - t0) / 20000.0, 1e-3)
    n = max(3, int(np.floor((t1 - t0) / dt)) + 1)
    tg = np.linspace(t0, t1, n)
    rpm = profile.rpm(tg)
    acc = _windowed_slope(profile._t, tg, max(smooth_s, 2 * dt))
    code = np.where(acc > steady_tol_rpm_s, 1, np.where(acc < -steady_tol_rpm_s, -1, 0))
    runs = _runs(code)
    _merge_short(runs, tg, min_duration_s)
    code = _slow_sweeps(runs, profile, tg, rpm, steady_tol_pct, hold_window_s)
    runs = _runs(code)
    _merge_short(runs, tg, min_duration_s)
    _refine_boundaries(runs, acc, tg, max(smooth_s, 2 * dt))
    names = {1: "run-up", -1: "coast-down", 0: "steady"}
    out = []
    for c, s, e in runs:
        ts, te = tg[s], tg[min(e, n - 1)]
        out.append(Segment(names[c], float(ts), float(te), float(rpm[s]), float(rpm[min(e, n - 1)])))
    return tuple(out)


def run_kind(segments) -> Literal["run-up", "coast-down", "mixed", "steady"]:
    """Kind of a run from its segments: steady parts do not count against a direction."""
    kinds = {s.kind for s in segments} - {"steady"}
    if not kinds:
        return "steady"
    if len(kinds) == 1:
        return kinds.pop()  # type: ignore[return-value]
    return "mixed"
