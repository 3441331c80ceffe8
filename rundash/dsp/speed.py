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

from dataclasses import dataclass
from typing import Literal

import numpy as np
from scipy.interpolate import CubicSpline, PchipInterpolator

from rundash.errors import DspError, TachError, invalid_value

__all__ = ["SpeedProfile", "speed_profile", "Segment", "segment", "run_kind"]

_NEWTON_ITERATIONS = 4  # for time_at_angle


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

    __slots__ = ("_t", "_c", "model", "_spline")

    def __init__(self, rev_times_s: np.ndarray, model: Literal["cubic", "pchip"] = "cubic"):
        t = np.asarray(rev_times_s, dtype=np.float64)
        k = np.arange(t.size, dtype=np.float64)
        spline = None
        if model == "cubic":
            spline = CubicSpline(t, k, bc_type="not-a-knot")
            if not _monotone(spline.c, np.diff(t)):
                model = "pchip"
        if model == "pchip":
            spline = PchipInterpolator(t, k)
        self._t = t
        self._spline = spline
        c = np.array(spline.c)
        c[3] = k[:-1]  # exact integer angle at every reference event
        self._c = np.ascontiguousarray(c)
        self.model = model

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
            u += np.repeat(c[3], counts)
        else:
            k, s = self._piece(t)
            u = ((c[0, k] * s + c[1, k]) * s + c[2, k]) * s
            u += c[3, k]
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
            f = ((c[0, k] * s + c[1, k]) * s + c[2, k]) * s + c[3, k] - flat
            df = (3.0 * c[0, k] * s + 2.0 * c[1, k]) * s + c[2, k]
            s = np.clip(s - f / df, 0.0, h)
        out = self._t[k] + s
        out[~((flat >= 0) & (flat <= self.n_revs))] = np.nan
        return out.reshape(a.shape)

    def rpm_at_angle(self, angle_rev) -> np.ndarray:
        """Shaft speed in rpm at shaft angle(s) in revolutions."""
        return self.rpm(self.time_at_angle(angle_rev))


def speed_profile(rev_times_s, *, model: Literal["cubic", "pchip"] = "cubic") -> SpeedProfile:
    """Speed profile from once-per-rev reference event times.

    Parameters
    ----------
    rev_times_s : array_like, shape (n_revs + 1,)
        Reference event times in s, strictly increasing, at least 5 (4 revolutions),
        e.g. :attr:`rundash.dsp.OncePerRev.times_s`.
    model : {'cubic', 'pchip'}
        ``'cubic'``: not-a-knot cubic spline of time against angle, used when monotone
        (else PCHIP, reported in ``SpeedProfile.model``); ``'pchip'``: always PCHIP.

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
    if t.size < 5:
        raise TachError(
            f"Too few once-per-rev events for a speed profile: {t.size} (need at least 5, "
            "i.e. 4 revolutions)")
    if not np.all(np.isfinite(t)) or np.any(np.diff(t) <= 0):
        raise TachError(invalid_value("rev_times_s", "non-increasing or non-finite times",
                                      "strictly increasing finite times in s"))
    return SpeedProfile(t, model)


@dataclass(frozen=True)
class Segment:
    """A part of a record with one kind of speed change. Times in s, speeds in rpm."""

    kind: Literal["run-up", "coast-down", "steady"]
    t_start_s: float
    t_end_s: float
    rpm_start: float
    rpm_end: float


def _windowed_slope(rev_times_s: np.ndarray, tg: np.ndarray, window_s: float) -> np.ndarray:
    """Least-squares slope (rpm/s) of per-revolution mean speed within +-window/2 of tg."""
    rt = np.asarray(rev_times_s, dtype=np.float64)
    tm = 0.5 * (rt[1:] + rt[:-1])
    r = 60.0 / np.diff(rt)
    # centred on the record for conditioning; cumulative sums give every window at once
    tc = tm - tm.mean()
    cs = [np.concatenate([[0.0], np.cumsum(v)]) for v in (np.ones_like(tc), tc, r, tc * tc,
                                                           tc * r)]
    lo = np.searchsorted(tm, tg - window_s / 2, side="left")
    hi = np.searchsorted(tm, tg + window_s / 2, side="right")
    # at least 3 revolutions per window (slow speeds): widen to the nearest ones
    short = hi - lo < 3
    if np.any(short):
        mid = np.clip(np.searchsorted(tm, tg[short]), 1, tm.size - 2)
        lo[short] = np.maximum(mid - 1, 0)
        hi[short] = np.minimum(mid + 2, tm.size)
    n, st, sr, stt, str_ = (c[hi] - c[lo] for c in cs)
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


def segment(
    profile: SpeedProfile,
    *,
    steady_tol_rpm_s: float = 10.0,
    min_duration_s: float = 2.0,
    smooth_s: float = 2.0,
) -> tuple[Segment, ...]:
    """Split a record into run-up, coast-down and steady segments.

    The acceleration at each point of a grid (every ``smooth_s / 4`` s) is the slope of a
    least-squares line through the per-revolution mean speeds (60 / revolution time)
    within ``smooth_s`` around it: it averages over every revolution in the window, so a
    tach quantised to whole samples (a square TTL pulse, no edge to interpolate) gives a
    steady slope even at high speed. Points whose acceleration magnitude is at most
    ``steady_tol_rpm_s`` are steady, others run-up or coast-down by sign. Runs shorter
    than ``min_duration_s`` are merged into the longer neighbour (common practice, no
    source).

    Parameters
    ----------
    profile : SpeedProfile
    steady_tol_rpm_s : float
        Largest |acceleration| in rpm/s still called steady.
    min_duration_s : float
        Shortest segment kept, in s.
    smooth_s : float
        Window of the acceleration estimate, in s.

    Returns
    -------
    tuple of Segment, in time order, covering ``[profile.t_start, profile.t_end]``.
    """
    for name, v in (("steady_tol_rpm_s", steady_tol_rpm_s), ("min_duration_s", min_duration_s),
                    ("smooth_s", smooth_s)):
        if not (np.isfinite(v) and v >= 0):
            raise DspError(invalid_value(name, v, "a non-negative number"))
    t0, t1 = profile.t_start, profile.t_end
    dt = max(smooth_s / 4.0, (t1 - t0) / 20000.0, 1e-3)
    n = max(3, int(np.floor((t1 - t0) / dt)) + 1)
    tg = np.linspace(t0, t1, n)
    rpm = profile.rpm(tg)
    acc = _windowed_slope(profile.rev_times_s, tg, max(smooth_s, 2 * dt))
    code = np.where(acc > steady_tol_rpm_s, 1, np.where(acc < -steady_tol_rpm_s, -1, 0))
    # runs of equal code
    starts = np.concatenate([[0], np.flatnonzero(np.diff(code)) + 1])
    ends = np.concatenate([starts[1:], [n]])
    runs = [[int(code[s]), int(s), int(e)] for s, e in zip(starts, ends)]
    # merge short runs into their longer neighbour, shortest first
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
        # join equal neighbours
        k = 0
        while k < len(runs) - 1:
            if runs[k][0] == runs[k + 1][0]:
                runs[k][2] = runs[k + 1][2]
                del runs[k + 1]
            else:
                k += 1
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
