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
from dataclasses import dataclass
from typing import Literal

import numpy as np

from rundash.analysis.profiles import as_profile
from rundash.analysis.zones import BEARING_VELOCITY, SHAFT_DISPLACEMENT
from rundash.analysis.zones import cite as _cite
from rundash.errors import AnalysisError, invalid_value

@dataclass(frozen=True)
class LevelCheck:
    """One level compared with one limit or zone table.

    ``where`` is ``'critical band'``, ``'top speed'`` or ``'above N_mc'``; ``band_rpm`` the speed range
    searched; ``speed_rpm`` where the highest level occurred; ``level`` in ``units``;
    ``status`` ``'within'`` | ``'exceeds'`` | ``'reference only'``.
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

    def to_json_dict(self) -> dict:
        return {"where": self.where, "band_rpm": list(self.band_rpm), "speed_rpm": self.speed_rpm,
                "quantity": self.quantity, "level": self.level, "units": self.units,
                "limit": self.limit_id, "limit_value": self.limit_value, "zone": self.zone,
                "status": self.status, "note": self.note, "source": self.source}


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
                 top_speed_is_steady: bool = False, top_window_pct: float = 1.0
                 ) -> tuple[LevelCheck, ...]:
    """Highest direct and 1X level through each critical band and at the top speed.

    The top speed is the highest speed reached within the operating range (up to N_mc,
    0.5 % tolerance); where the run went on above N_mc (an overspeed trip test) the
    levels there are checked in an ``'above N_mc'`` window, for reference only.

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
        ISO 10816-3 machine group and support class for velocity zones.
    top_speed_is_steady : bool
        True when the top speed was held steady: the ISO zones then give a verdict there.
    top_window_pct : float
        Points within this percentage below the highest speed count as the top speed.

    Returns
    -------
    tuple of LevelCheck
    """
    s = np.asarray(speed_rpm, dtype=float)
    if s.ndim != 1 or s.size == 0:
        raise AnalysisError(invalid_value("speed_rpm", f"shape {s.shape}", "a non-empty 1-D array"))
    if kind not in ("proximity", "velocity"):
        raise AnalysisError(invalid_value("kind", kind, "'proximity' or 'velocity'"))
    if not (max_continuous_speed_rpm > 0):
        raise AnalysisError(invalid_value("max_continuous_speed_rpm", max_continuous_speed_rpm, "a positive speed in rpm"))
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
    units = "um pp" if kind == "proximity" else "mm/s rms"
    prof = as_profile(profile) if profile is not None else None
    zones = {"shaft_displacement": SHAFT_DISPLACEMENT, "bearing_velocity": BEARING_VELOCITY}
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
        if not np.any(m):
            continue
        for quantity, lvl in series:
            vals = np.where(m & np.isfinite(lvl), lvl, -np.inf)
            k = int(np.argmax(vals))
            if not np.isfinite(vals[k]):
                continue
            level, at = float(vals[k]), float(s[k])
            steady = where == "top speed" and top_speed_is_steady
            above = where == "above N_mc"
            if kind == "proximity":
                bounds = tuple(float(b) for b in shaft_zone_boundaries_um_pp(at))
                src = _cite(zones["shaft_displacement"])
                zid = "iso-shaft-zones"
            else:
                bounds = velocity_zone_boundaries_mm_s(machine_group, support)
                row = next(r for r in zones["bearing_velocity"]
                           if r["group"] == machine_group and r["support"] == support)
                src = _cite(row)
                zid = f"iso-velocity-zones-{machine_group}-{support}"
            zone = zone_of(level, bounds)
            if steady:
                status = "within" if zone in ("A", "B") else "exceeds"
                note = f"zone {zone} (boundaries {', '.join(f'{b:.3g}' for b in bounds)} {units})"
            else:
                status = "reference only"
                note = (f"zone {zone} for reference: the zones are for steady operation, not "
                        f"for transients")
            out.append(LevelCheck(where, (lo, hi), at, quantity, level, units, zid, bounds[1],
                                  zone, status, note, src))
            if prof is None:
                continue
            for lim in prof.limits:
                if lim.transducer != kind or lim.quantity != quantity:
                    continue
                value = lim.value(max_continuous_speed_rpm)
                applies = not above and (lim.applies == "always" or where == "top speed")
                status = ("within" if level <= value else "exceeds") if applies else "reference only"
                if above:
                    note = (lim.title + ": above the maximum continuous speed (e.g. an "
                            "overspeed trip test); shown for reference, the limit applies "
                            "within the operating range")
                else:
                    note = lim.title + ("" if applies else
                                        ": applies at the top speed; shown for reference")
                out.append(LevelCheck(where, (lo, hi), at, quantity, level, units, lim.id, value,
                                      None, status, note, lim.source.cite()))
    return tuple(out)
