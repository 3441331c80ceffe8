"""Vibration levels through each critical band and at the top speed, against limits.

Limits are data: a profile's ``[[limits]]`` (e.g. the API 617-style unfiltered shaft
limit ``min(25.4, 25.4 sqrt(12000/N_mc))`` um p-p, from memory) and the shared reference
zones in :mod:`rundash.analysis.zones` (ISO 7919-3 shaft displacement zones
``4800/sqrt(n)``, ``9000/sqrt(n)``, ``13200/sqrt(n)`` um p-p, n in rpm, carried into
ISO 20816-3; ISO 10816-3 bearing-housing velocity zones in mm/s rms). The ISO zones are
meant for steady operation: during run-up and coast-down they are shown as a reference,
not a verdict, unless the caller states that the top speed was a steady hold.

Amplitudes: proximity probes in um p-p (1X p-p = 2 |c|), velocity in mm/s; the 1X
velocity level compared with rms zones is ``|c| / sqrt(2)`` (a sinusoid's rms).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Literal

import numpy as np

from rundash.analysis.profiles import as_profile
from rundash.analysis.scope import Scope, qualifying_hold
from rundash.analysis.zones import BEARING_VELOCITY, SHAFT_DISPLACEMENT, ZoneSettings
from rundash.analysis.zones import cite as _cite
from rundash.errors import AnalysisError, invalid_value

#: the ISO zones' scope: steady operation inside the operating range (the zones are
#: long-term criteria of steady running, ISO 10816-3 / 20816-3 clause 1, from memory);
#: a hold of at least 60 s within 1 % is our own reading of "steady"
ZONE_SCOPE = Scope(speed="hold-in-operating-range", hold_tolerance_pct=1.0, hold_min_s=60.0)

@dataclass(frozen=True)
class LevelCheck:
    """One level compared with one limit or zone table.

    ``where`` is ``'critical band'``, ``'top speed'`` or ``'above N_mc'``; ``band_rpm`` the speed range
    searched; ``speed_rpm`` where the highest level occurred; ``level`` in ``units``;
    ``status`` ``'within'`` | ``'exceeds'`` | ``'above alert'`` (a site alert level,
    said but not a failure) | ``'reference only'``; ``scope`` where
    the rule applies, in words (:meth:`rundash.analysis.scope.Scope.describe`).
    """

    where: str
    band_rpm: tuple[float, float]
    speed_rpm: float
    quantity: str
    level: float
    units: str
    limit_id: str
    limit_value: float | None
    zone: str | None
    status: str
    note: str
    source: str
    scope: str = ""

    def to_json_dict(self) -> dict:
        return {"where": self.where, "band_rpm": list(self.band_rpm), "speed_rpm": self.speed_rpm,
                "quantity": self.quantity, "level": self.level, "units": self.units,
                "limit": self.limit_id, "limit_value": self.limit_value, "zone": self.zone,
                "status": self.status, "note": self.note, "source": self.source,
                "scope": self.scope}


def shaft_zone_boundaries_um_pp(speed_rpm) -> tuple:
    """ISO 7919-3 zone boundaries A/B, B/C, C/D in um p-p at ``speed_rpm`` (from memory).

    >>> [round(b) for b in shaft_zone_boundaries_um_pp(3600.0)]
    [80, 150, 220]
    """
    z = SHAFT_DISPLACEMENT
    n = np.asarray(speed_rpm, dtype=float)
    if np.any(n <= 0):
        raise AnalysisError(invalid_value("speed_rpm", speed_rpm, "positive speeds in rpm"))
    root = np.sqrt(n)
    return tuple(z[k] / root for k in ("ab", "bc", "cd"))


def velocity_zone_boundaries_mm_s(group: Literal["group1", "group2"],
                                  support: Literal["rigid", "flexible"]) -> tuple[float, float, float]:
    """ISO 10816-3 zone boundaries A/B, B/C, C/D in mm/s rms (from memory)."""
    for row in BEARING_VELOCITY:
        if row["group"] == group and row["support"] == support:
            return float(row["ab"]), float(row["bc"]), float(row["cd"])
    raise AnalysisError(invalid_value("group/support", (group, support),
                                      "'group1' or 'group2' with 'rigid' or 'flexible'"))


def zone_of(level: float, boundaries) -> str:
    """Zone letter of a level given the A/B, B/C, C/D boundaries."""
    ab, bc, cd = boundaries
    return "A" if level < ab else "B" if level < bc else "C" if level < cd else "D"


def check_levels(speed_rpm, *, vector=None, direct=None, criticals=(), kind: Literal["proximity", "velocity"] = "proximity",
                 amplitude_factor: float = 2.0, max_continuous_speed_rpm: float, profile=None,
                 machine_group: Literal["group1", "group2"] = "group1",
                 support: Literal["rigid", "flexible"] = "rigid",
                 top_speed_is_steady: bool = False, top_window_pct: float = 1.0,
                 run_kind: str = "run-up", site_levels=(), zones: ZoneSettings | None = None
                 ) -> tuple[LevelCheck, ...]:
    """Highest direct and 1X level through each critical band and at the top speed.

    The top speed is the highest speed reached within the operating range (up to N_mc,
    0.5 % tolerance); where the run went on above N_mc (an overspeed trip test) the
    levels there are checked in an ``'above N_mc'`` window, for reference only.
    A profile limit is judged only inside its scope (:mod:`rundash.analysis.scope`):
    a rule whose speed condition is a steady hold is judged by :func:`check_holds`, and
    shown here for reference only.

    Parameters
    ----------
    speed_rpm : array_like, shape (n,)
        Shaft speed in rpm of each point.
    vector : array_like of complex, shape (n,), optional
        1X phasors (see :mod:`rundash.conventions`), storage units.
    direct : array_like, shape (n,), optional
        Direct (unfiltered) level per point: um p-p (proximity) or mm/s rms (velocity).
    criticals : sequence of Critical
        Bands searched: the half-power band when determinable, else the critical's band.
    kind : {'proximity', 'velocity'}
    amplitude_factor : float
        1X amplitude reported = ``amplitude_factor * |c|`` (2.0 p-p for proximity).
    max_continuous_speed_rpm : float
        N_mc for speed-dependent limits.
    profile : Profile or None
        Profile whose ``[[limits]]`` apply, in addition to the ISO reference zones.
    machine_group, support :
        ISO 10816-3 machine group and support class for velocity zones (when ``zones``
        is not given).
    zones : ZoneSettings, optional
        The ISO part and class of the zones and whether a new machine's zone A is
        expected (:class:`rundash.analysis.zones.ZoneSettings`); stated in each note.
    top_speed_is_steady : bool
        True when the top speed was held steady: the ISO zones then give a verdict there.
    top_window_pct : float
        Points within this percentage below the highest speed count as the top speed.
    run_kind : str
        What this stretch is: ``'run-up'``, ``'coast-down'`` (field runs),
        ``'shop-test'`` or ``'trip-test'``; a rule whose scope leaves it out is shown for
        reference only.
    site_levels : sequence of SiteLevel
        Levels the site or the OEM set for this probe (``measure``, ``alert``, ``trip``,
        ``source``; :class:`rundash.model.SiteLevel`). Where given for a measure they
        govern field runs at every speed: above ``trip`` the check ``'exceeds'``, above
        ``alert`` it is ``'above alert'`` (said, not a failure); the ISO zones of that
        measure are then shown for reference. A shop test is judged by the profile's
        limits, so there they are a reference.

    Returns
    -------
    tuple of LevelCheck
    """
    s = np.asarray(speed_rpm, dtype=float)
    if s.ndim != 1 or s.size == 0:
        raise AnalysisError(invalid_value("speed_rpm", f"shape {s.shape}", "a non-empty 1-D array"))
    if not (max_continuous_speed_rpm > 0):
        raise AnalysisError(invalid_value("max_continuous_speed_rpm", max_continuous_speed_rpm, "a positive speed in rpm"))
    series, units = _series(s, vector, direct, kind, amplitude_factor)
    zs = zones if zones is not None else ZoneSettings(group=machine_group, support=support)
    prof = as_profile(profile) if profile is not None else None
    windows = []
    for c in criticals:
        hp = c.half_power
        band = (hp.n1_rpm, hp.n2_rpm) if hp is not None and hp.determinable else c.band_rpm
        windows.append(("critical band", (float(band[0]), float(band[1]))))
    # The limits and zones apply within the operating range: the "top speed" is the
    # highest speed reached up to N_mc (0.5 % tolerance); a run that went on above it (an
    # overspeed trip test) gets an "above N_mc" window, shown for reference only
    # (common practice, no source).
    n_mc_tol = max_continuous_speed_rpm * 1.005
    top_all = float(np.nanmax(s))
    inside = s[s <= n_mc_tol]
    top = float(np.nanmax(inside)) if inside.size else top_all
    windows.append(("top speed", (top * (1 - top_window_pct / 100.0), top)))
    if top_all > n_mc_tol:
        windows.append(("above N_mc", (n_mc_tol, top_all)))
    out = []
    for where, (lo, hi) in windows:
        m = (s >= lo) & (s <= hi)
        for quantity, lvl in series:
            got = _highest(m, lvl, s)
            if got is None:
                continue
            level, at = got
            steady = where == "top speed" and top_speed_is_steady
            out += _with_site(_zone_check(where, (lo, hi), at, quantity, level, units, kind,
                                          zs, steady),
                              site_levels, run_kind)
            if prof is None:
                continue

            def window_why(sc, where=where):
                if where == "above N_mc":
                    return ("above the maximum continuous speed (e.g. an overspeed trip "
                            "test); the limit applies within the operating range")
                if sc.needs_hold:
                    return (f"applies to: {sc.describe()}; a {where} in a sweep is not "
                            "such a hold")
                if sc.speed == "top-speed" and where != "top speed":
                    return "applies at the top speed"
                return None

            out += _profile_checks(prof, where, (lo, hi), at, quantity, level, units, kind,
                                   run_kind, max_continuous_speed_rpm, window_why)
    return tuple(out)


def check_holds(time_s, speed_rpm, holds, *, vector=None, direct=None,
                kind: Literal["proximity", "velocity"] = "proximity",
                amplitude_factor: float = 2.0, min_operating_speed_rpm: float,
                max_continuous_speed_rpm: float, profile=None, run_kind: str = "steady",
                machine_group: Literal["group1", "group2"] = "group1",
                support: Literal["rigid", "flexible"] = "rigid", site_levels=(),
                zones: ZoneSettings | None = None) -> tuple[LevelCheck, ...]:
    """Highest direct and 1X level during each steady hold, against the rules whose
    scope is a hold (and the ISO zones, whose scope is steady operation in the range).

    Parameters
    ----------
    time_s, speed_rpm : array_like, shape (n,)
        Times (s) and speeds (rpm) of the points (the whole run, not one direction).
    holds : sequence of Hold
        From :func:`rundash.analysis.scope.find_holds`.
    run_kind : str
        ``'steady'`` for a field run, else ``'shop-test'`` or ``'trip-test'``.
    Other parameters as :func:`check_levels`.

    Returns
    -------
    tuple of LevelCheck
        ``where`` is ``'steady hold'``; a rule is judged when the hold meets its scope
        (run kind, tolerance, duration, speed), else shown for reference only. Holds
        outside the operating range (warm-up, slow roll) are left out.
    """
    t = np.asarray(time_s, dtype=float)
    s = np.asarray(speed_rpm, dtype=float)
    if t.shape != s.shape or s.ndim != 1:
        raise AnalysisError(invalid_value("time_s", f"shape {t.shape}", f"the shape of speed_rpm {s.shape}"))
    series, units = _series(s, vector, direct, kind, amplitude_factor)
    zs = zones if zones is not None else ZoneSettings(group=machine_group, support=support)
    prof = as_profile(profile) if profile is not None else None
    n_min, n_mc = float(min_operating_speed_rpm), float(max_continuous_speed_rpm)
    out = []
    for h in holds:
        m = (t >= h.t_start_s) & (t <= h.t_end_s)
        band = (h.lo_rpm, h.hi_rpm)
        tol = ZONE_SCOPE.hold_tolerance_pct / 100.0
        if not n_min * (1 - tol) <= h.speed_rpm <= n_mc * (1 + tol):
            continue  # a warm-up or slow-roll hold: no rule here is about it
        in_range = qualifying_hold(ZONE_SCOPE, (h,), min_operating_speed_rpm=n_min,
                                   max_continuous_speed_rpm=n_mc) is not None
        for quantity, lvl in series:
            got = _highest(m, lvl, s)
            if got is None:
                continue
            level, at = got
            zc = _zone_check("steady hold", band, at, quantity, level, units, kind,
                             zs, in_range)
            if not in_range:
                zc = replace(zc, note=f"zone {zc.zone} for reference: the hold is shorter "
                                      f"than the zones' scope ({ZONE_SCOPE.describe()})")
            out += _with_site(replace(zc, note=f"{zc.note}; hold {h.describe()}"),
                              site_levels, run_kind)
            if prof is None:
                continue

            def hold_why(sc, h=h, in_range=in_range):
                if sc.needs_hold and qualifying_hold(
                        sc, (h,), min_operating_speed_rpm=n_min,
                        max_continuous_speed_rpm=n_mc) is None:
                    return f"applies to: {sc.describe()}; this hold does not qualify"
                if sc.speed == "top-speed" and not in_range:
                    return "applies at the top speed within the operating range"
                return None

            out += _profile_checks(prof, "steady hold", band, at, quantity, level, units, kind,
                                   run_kind, n_mc, hold_why, f"; hold {h.describe()}")
    return tuple(out)


def _profile_checks(prof, where, band, at, quantity, level, units, kind, run_kind, n_mc,
                    window_why, tail: str = "") -> list[LevelCheck]:
    """The profile's limits for one reading: judged inside the rule's scope (run kind,
    transducer, measure, and the window's own condition ``window_why(scope)``, None when
    met), else reference only with the reason."""
    out = []
    for lim in prof.limits:
        if lim.transducer != kind or lim.quantity != quantity:
            continue
        sc = lim.scope
        value = lim.value(n_mc)
        why = window_why(sc) if where == "above N_mc" else None
        if why is None and not sc.covers(run_kind, transducer=kind, measure=quantity):
            why = f"applies to: {sc.describe()}; this is a {_kind_words(run_kind)}"
        if why is None:
            why = window_why(sc)
        status = ("within" if level <= value else "exceeds") if why is None \
            else "reference only"
        note = lim.title + ("" if why is None else f": {why}; shown for reference") + tail
        out.append(LevelCheck(where, band, at, quantity, level, units, lim.id, value, None,
                              status, note, lim.source.cite(), sc.describe()))
    return out


def _with_site(zone: LevelCheck, site_levels, run_kind: str) -> list[LevelCheck]:
    """The zone check, and the site levels' check of the same reading where given (they
    then govern: the zone becomes a reference)."""
    site = [x for x in site_levels if x.measure == zone.quantity]
    if not site:
        return [zone]
    x = site[0]
    lvl, u = zone.level, zone.units
    given = ", ".join(f"{name} {v:.3g} {u}" for name, v in (("alert", x.alert), ("trip", x.trip))
                      if v is not None)
    scope = ("field runs (run-up, coast-down, steady) and trip tests, at every speed")
    if run_kind == "shop-test":
        status = "reference only"
        note = (f"site levels ({given}): a shop test is judged by the profile's limits; "
                "shown for reference")
    elif x.trip is not None and lvl > x.trip:
        status, note = "exceeds", f"site trip-style level exceeded ({given})"
    elif x.alert is not None and lvl > x.alert:
        status, note = "above alert", f"site alert level exceeded ({given})"
    else:
        status, note = "within", f"below the site levels ({given})"
    out = []
    if zone.status != "reference only" and status != "reference only":
        zone = replace(zone, status="reference only",
                       note=f"{zone.note}; shown for reference: the site levels govern")
    out.append(zone)
    out.append(LevelCheck(zone.where, zone.band_rpm, zone.speed_rpm, zone.quantity, lvl, u,
                          "site-levels", x.trip if x.trip is not None else x.alert, None,
                          status, note, x.source, scope))
    return out


def _kind_words(run_kind: str) -> str:
    return {"run-up": "field run-up", "coast-down": "field coast-down",
            "steady": "field run", "shop-test": "shop test",
            "trip-test": "trip test"}.get(run_kind, run_kind)


def _series(s, vector, direct, kind, amplitude_factor):
    if kind not in ("proximity", "velocity"):
        raise AnalysisError(invalid_value("kind", kind, "'proximity' or 'velocity'"))
    series = []
    if direct is not None:
        d = np.asarray(direct, dtype=float)
        if d.shape != s.shape:
            raise AnalysisError(invalid_value("direct", f"shape {d.shape}", f"the shape of speed_rpm {s.shape}"))
        series.append(("direct", d))
    if vector is not None:
        v = np.asarray(vector, dtype=complex)
        if v.shape != s.shape:
            raise AnalysisError(invalid_value("vector", f"shape {v.shape}", f"the shape of speed_rpm {s.shape}"))
        lvl = amplitude_factor * np.abs(v) if kind == "proximity" else np.abs(v) / math.sqrt(2.0)
        series.append(("1x", lvl))
    return series, ("um pp" if kind == "proximity" else "mm/s rms")


def _highest(mask, lvl, s):
    if not np.any(mask):
        return None
    vals = np.where(mask & np.isfinite(lvl), lvl, -np.inf)
    k = int(np.argmax(vals))
    if not np.isfinite(vals[k]):
        return None
    return float(vals[k]), float(s[k])


def _zone_check(where, band, at, quantity, level, units, kind, zs: ZoneSettings,
                steady) -> LevelCheck:
    if kind == "proximity":
        bounds = tuple(float(b) for b in shaft_zone_boundaries_um_pp(at))
        src = _cite(SHAFT_DISPLACEMENT)
        zid = "iso-shaft-zones"
    else:
        row = zs.velocity_row(at)
        bounds = (float(row["ab"]), float(row["bc"]), float(row["cd"]))
        src = _cite(row)
        zid = {"10816-3": f"iso-velocity-zones-{zs.group}-{zs.support}",
               "10816-7": f"iso-pump-zones-{zs.pump_category}-{zs.pump_power}",
               "10816-2": "iso-large-set-zones"}[zs.part]
    zone = zone_of(level, bounds)
    settings = zs.describe() if kind != "proximity" else (
        "shaft zones; zone A expected for a new machine" if zs.new_machine else
        "shaft zones; zones A and B acceptable for long-term operation") + (
        " (default)" if "new_machine" in zs.defaulted else "")
    if steady:
        status = "within" if zs.acceptable(zone) else "exceeds"
        note = (f"zone {zone} (boundaries {', '.join(f'{b:.3g}' for b in bounds)} {units}; "
                f"{settings})")
    else:
        status = "reference only"
        note = (f"zone {zone} for reference: the zones are for steady operation, not "
                f"for transients ({settings})")
    return LevelCheck(where, band, at, quantity, level, units, zid, bounds[1], zone, status,
                      note, src, ZONE_SCOPE.describe())
