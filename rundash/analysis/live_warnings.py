"""Warnings while a run is being recorded: pure logic, fed with the latest state.

:class:`LiveWarnings` is given the critical speeds expected from earlier runs of the
machine (:func:`expected_bands`), watched levels per probe (the site's or OEM's levels
of the machine description, else a profile limit whose scope is a field run), and
:class:`WarningSettings`;
each call of :meth:`LiveWarnings.update` with the current record time, speed,
acceleration, latest levels and tach state returns the events that became true then:

``approaching``
    speed moving toward an expected band (rising below it, or falling above it) with an
    acceleration of at least ``min_accel_rpm_s``, and the band's near edge reached within
    ``lead_time_s`` at the current acceleration (the message gives the estimated time);
``entered-band`` / ``left-band``
    speed inside / out of an expected band (info);
``dwell``
    speed inside one band continuously for longer than ``dwell_limit_s``;
``level-high`` / ``level-normal``
    a probe's level above one of its watched levels / back below ``rearm_fraction`` of
    it (plain words: "above the site alert level"; the protection system's setpoints are
    its own, and "alarm" is left to it);
``tach-lost`` / ``tach-restored``
    the once-per-rev reference stopped / came back.

Each condition raises its event once per occurrence (hysteresis by re-arming only when
the condition has cleared), so a log never floods. Dwelling near a critical and driving
through one too slowly are common concerns of start-up practice (common practice, no
source); the times and margins are settings, not guidance values.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Literal, Mapping, Sequence

import numpy as np

from rundash.errors import AnalysisError, invalid_value

__all__ = ["ExpectedBand", "WarningSettings", "LiveEvent", "LiveWarnings", "expected_bands",
           "speed_and_acceleration"]

Severity = Literal["info", "warning", "alarm"]


@dataclass(frozen=True)
class ExpectedBand:
    """A speed band where a critical is expected, from earlier runs. Speeds in rpm."""

    speed_rpm: float
    lo_rpm: float
    hi_rpm: float
    sources: tuple[str, ...] = ()

    def __post_init__(self):
        if not (0 <= self.lo_rpm <= self.speed_rpm <= self.hi_rpm):
            raise AnalysisError(invalid_value(
                "band", (self.lo_rpm, self.speed_rpm, self.hi_rpm),
                "0 <= lo_rpm <= speed_rpm <= hi_rpm"))

    @property
    def label(self) -> str:
        return f"{self.speed_rpm:.0f} rpm ({self.lo_rpm:.0f}-{self.hi_rpm:.0f})"


@dataclass(frozen=True)
class WarningSettings:
    """Thresholds of the live warnings (times in s, rates in rpm/s)."""

    lead_time_s: float = 30.0
    min_accel_rpm_s: float = 2.0
    dwell_limit_s: float = 10.0
    rearm_fraction: float = 0.9

    def __post_init__(self):
        for name in ("lead_time_s", "min_accel_rpm_s", "dwell_limit_s"):
            v = getattr(self, name)
            if not (math.isfinite(v) and v > 0):
                raise AnalysisError(invalid_value(name, v, "a positive number"))
        if not 0 < self.rearm_fraction <= 1:
            raise AnalysisError(invalid_value("rearm_fraction", self.rearm_fraction,
                                              "a fraction in (0, 1]"))


@dataclass(frozen=True)
class LiveEvent:
    """One event of the log. ``time_s`` record time, ``speed_rpm`` the speed then."""

    time_s: float
    speed_rpm: float | None
    kind: str
    severity: Severity
    message: str
    details: dict[str, Any] = field(default_factory=dict)

    def to_row(self) -> dict[str, Any]:
        return dict(time_s=self.time_s, speed_rpm=self.speed_rpm, kind=self.kind,
                    severity=self.severity, message=self.message, details=self.details)


def expected_bands(criticals: Sequence[tuple[float, float, float, str]], *,
                   min_width_pct: float = 2.0) -> tuple[ExpectedBand, ...]:
    """Merge criticals of earlier runs into expected bands.

    Parameters
    ----------
    criticals : sequence of (speed_rpm, lo_rpm, hi_rpm, source)
        One per critical found (any probe, direction, run); ``lo``/``hi`` the band of
        the finding (e.g. the half-power speeds). A band narrower than ``min_width_pct``
        of its speed on either side is widened to that.
    min_width_pct : float
        Smallest half-width of a band, in % of its speed.

    Returns
    -------
    tuple of ExpectedBand
        Overlapping bands merged (union); the speed of a merged band is the median of
        its criticals. In speed order.
    """
    rows = []
    for speed, lo, hi, src in criticals:
        if not (math.isfinite(speed) and speed > 0):
            continue
        w = speed * min_width_pct / 100.0
        lo = speed - w if not math.isfinite(lo) else min(lo, speed - w)
        hi = speed + w if not math.isfinite(hi) else max(hi, speed + w)
        rows.append((max(lo, 0.0), hi, speed, src))
    rows.sort()
    out: list[ExpectedBand] = []
    group: list[tuple] = []
    for r in rows:
        if group and r[0] > max(g[1] for g in group):
            out.append(_merge(group))
            group = []
        group.append(r)
    if group:
        out.append(_merge(group))
    return tuple(out)


def _merge(group) -> ExpectedBand:
    speeds = [g[2] for g in group]
    srcs = tuple(dict.fromkeys(g[3] for g in group if g[3]))
    return ExpectedBand(speed_rpm=float(np.median(speeds)), lo_rpm=float(min(g[0] for g in group)),
                        hi_rpm=float(max(g[1] for g in group)), sources=srcs)


def speed_and_acceleration(rev_times_s, *, window_s: float = 1.0,
                           min_revs: int = 3) -> tuple[float | None, float | None]:
    """Current speed (rpm) and acceleration (rpm/s) from the latest once-per-rev events.

    A straight line is fitted (least squares) to the per-revolution speeds
    ``60 / (t[k+1] - t[k])`` at the revolutions' mid times over the last ``window_s``
    (at least ``min_revs`` revolutions); the speed is the line's value at the last event.

    Returns ``(None, None)`` with fewer than two revolutions; acceleration ``None`` with
    fewer than ``min_revs``.

    Examples
    --------
    >>> import numpy as np
    >>> t = np.sqrt(np.arange(200) / 5.0)  # theta = 5 t^2 rev: 600 rpm/s from rest
    >>> rpm, acc = speed_and_acceleration(t)
    >>> round(acc), round(float(rpm / 60.0 / t[-1]), 1)
    (600, 10.0)
    """
    t = np.asarray(rev_times_s, dtype=np.float64)
    if t.size < 3:
        if t.size == 2:
            return 60.0 / float(t[1] - t[0]), None
        return None, None
    lo = np.searchsorted(t, t[-1] - window_s, side="left")
    lo = min(lo, t.size - 1 - min_revs)
    lo = max(lo, 0)
    seg = t[lo:]
    dt = np.diff(seg)
    mid = 0.5 * (seg[:-1] + seg[1:])
    rpm = 60.0 / dt
    if rpm.size < min_revs:
        return float(rpm[-1]), None
    slope, icept = np.polyfit(mid - seg[-1], rpm, 1)
    return float(icept), float(slope)


class LiveWarnings:
    """Stateful warning logic (no I/O). See the module doc for the events.

    Parameters
    ----------
    bands : sequence of ExpectedBand
        Where criticals are expected.
    alarms : mapping of probe name -> (level, units, what) or a list of them
        Watched level(s) per probe in the level's units (e.g. um p-p direct), each with
        a short description of what it is and where it comes from (e.g. "the site alert
        level (OEM manual, table 7)").
    settings : WarningSettings
    """

    def __init__(self, bands: Sequence[ExpectedBand] = (),
                 alarms: Mapping[str, tuple[float, str, str]] | None = None,
                 settings: WarningSettings | None = None):
        self.bands = tuple(bands)
        self.alarms = {p: [tuple(x)] if not isinstance(x, list) else [tuple(y) for y in x]
                       for p, x in dict(alarms or {}).items()}
        self.settings = settings or WarningSettings()
        self._approach_armed = [True] * len(self.bands)
        self._inside_since: list[float | None] = [None] * len(self.bands)
        self._dwell_done = [False] * len(self.bands)
        self._alarm_on: dict[tuple[str, int], bool] = {
            (p, k): False for p, xs in self.alarms.items() for k in range(len(xs))}
        self._tach_ok = True
        self.log: list[LiveEvent] = []

    def active(self) -> list[str]:
        """Short texts of the conditions that hold now (for an alert strip)."""
        out = []
        if not self._tach_ok:
            out.append("tach lost")
        for i, b in enumerate(self.bands):
            if self._inside_since[i] is not None:
                out.append(f"inside band {b.label}" + (" too long" if self._dwell_done[i]
                                                       else ""))
        out += [f"{p} above {self.alarms[p][k][2]}" for (p, k), on in self._alarm_on.items()
                if on]
        return out

    def update(self, *, time_s: float, speed_rpm: float | None, accel_rpm_s: float | None,
               levels: Mapping[str, float] | None = None, tach_ok: bool = True
               ) -> list[LiveEvent]:
        """Feed the current state; return the events raised by it (also kept in ``log``)."""
        s = self.settings
        ev: list[LiveEvent] = []

        def add(kind, sev, msg, **details):
            ev.append(LiveEvent(float(time_s), None if speed_rpm is None else float(speed_rpm),
                                kind, sev, msg, details))

        if tach_ok != self._tach_ok:
            if not tach_ok:
                add("tach-lost", "alarm", "tach lost: no once-per-rev event for longer than "
                    "expected; speed and vectors are not updated")
            else:
                add("tach-restored", "info", "tach back: once-per-rev events arrive again")
            self._tach_ok = tach_ok
        if tach_ok and speed_rpm is not None and math.isfinite(speed_rpm):
            acc = accel_rpm_s if accel_rpm_s is not None and math.isfinite(accel_rpm_s) else 0.0
            for i, b in enumerate(self.bands):
                inside = b.lo_rpm <= speed_rpm <= b.hi_rpm
                if inside:
                    if self._inside_since[i] is None:
                        self._inside_since[i] = float(time_s)
                        self._dwell_done[i] = False
                        add("entered-band", "info", f"entered the expected critical band "
                            f"{b.label}", band=i, band_rpm=[b.lo_rpm, b.hi_rpm],
                            critical_rpm=b.speed_rpm)
                    self._approach_armed[i] = False
                    stay = float(time_s) - self._inside_since[i]
                    if not self._dwell_done[i] and stay > s.dwell_limit_s:
                        self._dwell_done[i] = True
                        add("dwell", "warning", f"dwelling inside the critical band {b.label} "
                            f"for {stay:.0f} s (limit {s.dwell_limit_s:g} s): move through it",
                            band=i, band_rpm=[b.lo_rpm, b.hi_rpm], critical_rpm=b.speed_rpm,
                            dwell_s=stay)
                    continue
                if self._inside_since[i] is not None:
                    stay = float(time_s) - self._inside_since[i]
                    add("left-band", "info", f"left the critical band {b.label} after {stay:.1f} s",
                        band=i, band_rpm=[b.lo_rpm, b.hi_rpm], critical_rpm=b.speed_rpm,
                        dwell_s=stay)
                    self._inside_since[i] = None
                if speed_rpm < b.lo_rpm and acc >= s.min_accel_rpm_s:
                    tta = (b.lo_rpm - speed_rpm) / acc
                    direction = "rising"
                elif speed_rpm > b.hi_rpm and acc <= -s.min_accel_rpm_s:
                    tta = (speed_rpm - b.hi_rpm) / -acc
                    direction = "falling"
                else:
                    tta = math.inf
                    direction = ""
                if tta <= s.lead_time_s:
                    if self._approach_armed[i]:
                        self._approach_armed[i] = False
                        add("approaching", "warning",
                            f"approaching the critical {b.label}: speed {direction} at "
                            f"{abs(acc):.0f} rpm/s, band reached in about {tta:.0f} s",
                            band=i, band_rpm=[b.lo_rpm, b.hi_rpm], critical_rpm=b.speed_rpm,
                            time_to_band_s=tta, accel_rpm_s=acc)
                elif tta > 2.0 * s.lead_time_s:
                    self._approach_armed[i] = True  # far again (or no longer approaching)
        for probe, value in (levels or {}).items():
            if probe not in self.alarms or value is None or not math.isfinite(value):
                continue
            for k, (limit, units, what) in enumerate(self.alarms[probe]):
                key = (probe, k)
                if not self._alarm_on[key] and value > limit:
                    self._alarm_on[key] = True
                    add("level-high", "warning", f"{probe}: {value:.1f} {units} above "
                        f"{what} {limit:.1f} {units}", probe=probe, value=value,
                        limit=limit, units=units, level=k)
                elif self._alarm_on[key] and value < s.rearm_fraction * limit:
                    self._alarm_on[key] = False
                    add("level-normal", "info", f"{probe}: {value:.1f} {units} back below "
                        f"{what} {limit:.1f} {units}", probe=probe, value=value,
                        limit=limit, units=units, level=k)
        self.log.extend(ev)
        return ev
