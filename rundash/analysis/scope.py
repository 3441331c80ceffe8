"""Where a rule applies: run kinds, speed condition, transducer and measure; steady holds.

Every margin and limit rule of a guidance profile states its scope (a ``scope`` table in
the profile file, :mod:`rundash.analysis.profiles`). A rule is applied as pass/fail only
inside its scope; elsewhere its value is shown as *reference only*, and nothing (the run
verdict, the live monitor) is raised on it.

Run kinds (what the stretch of record is):

``run-up`` / ``coast-down``
    a field run's rising / falling stretch;
``steady``
    a field run held at one speed (a hold found in the speed profile);
``shop-test``
    a run marked at import as a shop (mechanical running) test;
``trip-test``
    a run marked at import as an overspeed trip test.

Speed conditions:

``any``
    wherever the transducer and measure fit;
``top-speed``
    at the highest speed the run reached within the operating range;
``hold-at-max-continuous``
    a steady hold at the maximum continuous speed N_mc: the speed within
    ``hold_tolerance_pct`` of N_mc, and of the hold's own mean, for at least
    ``hold_min_s``;
``hold-in-operating-range``
    a steady hold (same test) whose mean lies within N_min..N_mc (widened by the
    tolerance).

Holds are found from the speed profile (:func:`find_holds`): the longest stretches in
which the highest speed is at most ``1 + 2 tol/100`` times the lowest (a band of
+/- ``tol`` % about its middle), trimmed at both ends to the points within ``tol/2`` % of
the stretch's median (the ends of the ramps either side), lasting at least the stated
time.
"""

from __future__ import annotations

from array import array
from collections import deque
from dataclasses import dataclass

import numpy as np

from rundash.errors import AnalysisError, invalid_value, require_positive

SCOPE_RUN_KINDS = ("run-up", "coast-down", "steady", "shop-test", "trip-test")
SPEED_CONDITIONS = ("any", "top-speed", "hold-at-max-continuous", "hold-in-operating-range")
HOLD_CONDITIONS = ("hold-at-max-continuous", "hold-in-operating-range")
_KIND_WORDS = {"run-up": "field run-up", "coast-down": "field coast-down",
               "steady": "field steady hold", "shop-test": "shop (mechanical running) test",
               "trip-test": "overspeed trip test"}


@dataclass(frozen=True)
class Scope:
    """Where a rule applies (see the module doc). Tolerance in %, time in s."""

    run_kinds: tuple[str, ...] = SCOPE_RUN_KINDS
    speed: str = "any"
    hold_tolerance_pct: float = 1.0
    hold_min_s: float = 0.0
    transducers: tuple[str, ...] = ("proximity", "velocity", "acceleration")
    measures: tuple[str, ...] = ("direct", "1x")

    def __post_init__(self):
        for k in self.run_kinds:
            if k not in SCOPE_RUN_KINDS:
                raise AnalysisError(invalid_value("scope.run_kinds", k,
                                                  ", ".join(map(repr, SCOPE_RUN_KINDS))))
        if self.speed not in SPEED_CONDITIONS:
            raise AnalysisError(invalid_value("scope.speed", self.speed,
                                              ", ".join(map(repr, SPEED_CONDITIONS))))

    @property
    def needs_hold(self) -> bool:
        return self.speed in HOLD_CONDITIONS

    def describe(self) -> str:
        """Plain words, e.g. 'shop (mechanical running) test, during a steady hold at
        N_mc (within 1 % for at least 600 s), proximity, direct'."""
        kinds = ("any run" if set(self.run_kinds) == set(SCOPE_RUN_KINDS)
                 else " or ".join(_KIND_WORDS[k] for k in self.run_kinds))
        speed = {"any": "at any speed", "top-speed": "at the top speed within the operating "
                 "range"}.get(self.speed)
        if speed is None:
            where = "at N_mc" if self.speed == "hold-at-max-continuous" else \
                "inside the operating range"
            speed = (f"during a steady hold {where} (within {self.hold_tolerance_pct:g} % "
                     f"for at least {self.hold_min_s:g} s)")
        return f"{kinds}, {speed}, {'/'.join(self.transducers)}, {'/'.join(self.measures)}"

    def covers(self, run_kind: str, *, transducer: str | None = None,
               measure: str | None = None) -> bool:
        """True when the run kind, transducer and measure are inside the scope (the speed
        condition is checked by the caller, where the window is known)."""
        return (run_kind in self.run_kinds
                and (transducer is None or transducer in self.transducers)
                and (measure is None or measure in self.measures))


@dataclass(frozen=True)
class Hold:
    """A stretch of steady speed: times in s, speeds in rpm (mean, lowest, highest)."""

    t_start_s: float
    t_end_s: float
    speed_rpm: float
    lo_rpm: float
    hi_rpm: float

    @property
    def duration_s(self) -> float:
        return self.t_end_s - self.t_start_s

    def describe(self) -> str:
        return (f"{self.speed_rpm:.0f} rpm held {self.duration_s:.0f} s "
                f"({self.t_start_s:.0f}-{self.t_end_s:.0f} s, {self.lo_rpm:.0f}-"
                f"{self.hi_rpm:.0f} rpm)")


def find_holds(time_s, speed_rpm, *, tolerance_pct: float, min_duration_s: float
               ) -> tuple[Hold, ...]:
    """Steady holds of a speed profile.

    Parameters
    ----------
    time_s, speed_rpm : array_like, shape (n,)
        Times (s, increasing) and speeds (rpm) of the speed profile (e.g. per block).
    tolerance_pct : float
        Half-width of the band, in % of its middle: within a hold the highest speed is at
        most ``1 + 2 tolerance_pct/100`` times the lowest.
    min_duration_s : float
        Shortest hold reported.

    Returns
    -------
    tuple of Hold
        Maximal, non-overlapping holds in time order (a greedy scan from the start with
        running minimum and maximum, O(n)), each trimmed to the points within
        ``tolerance_pct / 2`` of its median.

    Examples
    --------
    >>> import numpy as np
    >>> t = np.arange(0.0, 1000.0, 1.0)
    >>> s = np.where(t < 300, 10.0 * t, 3000.0) + np.where(t > 900, -20.0 * (t - 900), 0)
    >>> [(round(h.speed_rpm), round(h.duration_s)) for h in find_holds(
    ...     t, s, tolerance_pct=1.0, min_duration_s=60.0)]
    [(3000, 601)]
    """
    t = np.asarray(time_s, dtype=float)
    s = np.asarray(speed_rpm, dtype=float)
    if t.shape != s.shape or t.ndim != 1:
        raise AnalysisError(invalid_value("time_s/speed_rpm", f"shapes {t.shape}, {s.shape}",
                                          "two 1-D arrays of one length"))
    require_positive("tolerance_pct", tolerance_pct, "a positive percentage")
    ok = np.isfinite(t) & np.isfinite(s) & (s > 0)
    t, s = t[ok], s[ok]
    n = s.size
    ratio = 1.0 + 2.0 * tolerance_pct / 100.0
    out: list[Hold] = []
    # the scan reads one value at a time: Python floats (exact), not numpy scalars, from
    # arrays of doubles (8 bytes a value, where a list holds 40: a long run's blocks)
    v, tl = array("d"), array("d")
    v.frombytes(np.ascontiguousarray(s, dtype=np.float64).tobytes())
    tl.frombytes(np.ascontiguousarray(t, dtype=np.float64).tobytes())
    qmax: deque[int] = deque()
    qmin: deque[int] = deque()
    i = j = 0  # window [i, j)
    while i < n:
        if j <= i:
            j = i
            qmax.clear()
            qmin.clear()
        while j < n:
            hi = max(v[qmax[0]] if qmax else v[j], v[j])
            lo = min(v[qmin[0]] if qmin else v[j], v[j])
            if hi > ratio * lo:
                break
            while qmax and v[qmax[-1]] <= v[j]:
                qmax.pop()
            qmax.append(j)
            while qmin and v[qmin[-1]] >= v[j]:
                qmin.pop()
            qmin.append(j)
            j += 1
        if j - 1 > i and tl[j - 1] - tl[i] >= min_duration_s:
            # the window may take in the ends of the ramps either side: keep the points
            # within half the tolerance of its median
            med = float(np.median(s[i:j]))
            near = np.flatnonzero(np.abs(s[i:j] - med) <= 0.5 * tolerance_pct / 100.0 * med)
            a, b = i + int(near[0]), i + int(near[-1]) + 1
            if t[b - 1] - t[a] >= min_duration_s:
                seg = s[a:b]
                out.append(Hold(float(t[a]), float(t[b - 1]), float(np.mean(seg)),
                                float(seg.min()), float(seg.max())))
            i = j
            continue
        if qmax and qmax[0] == i:
            qmax.popleft()
        if qmin and qmin[0] == i:
            qmin.popleft()
        i += 1
    return tuple(out)


def qualifying_hold(scope: Scope, holds, *, min_operating_speed_rpm: float,
                    max_continuous_speed_rpm: float) -> Hold | None:
    """The longest hold meeting the scope's speed condition, or None."""
    if not scope.needs_hold:
        return None
    tol = scope.hold_tolerance_pct / 100.0
    n_min, n_mc = float(min_operating_speed_rpm), float(max_continuous_speed_rpm)
    ok = []
    for h in holds:
        if h.duration_s < scope.hold_min_s or h.hi_rpm > (1 + 2 * tol) * h.lo_rpm:
            continue
        if scope.speed == "hold-at-max-continuous":
            good = abs(h.speed_rpm - n_mc) <= tol * n_mc and h.hi_rpm <= n_mc * (1 + tol) \
                and h.lo_rpm >= n_mc * (1 - tol)
        else:
            good = n_min * (1 - tol) <= h.speed_rpm <= n_mc * (1 + tol)
        if good:
            ok.append(h)
    return max(ok, key=lambda h: h.duration_s) if ok else None
