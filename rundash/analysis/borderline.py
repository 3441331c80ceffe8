"""Borderline margin verdicts: when the verdict turns on which AF reading is taken.

A critical's amplification factor is read several ways (the half-power bandwidth, API
684; the modal fit's damping ratio, turned into the half-power AF of that damping by the
closed form of the single-degree-of-freedom unbalance response,
:func:`rundash.analysis.transient_model.unbalance_half_power_af`; the fit's damping ratio
two standard deviations either side). When the readings, judged by the same rule, give
both a pass and a fail (an AF straddling the rule's 2.5 threshold, or a margin found
within the spread of the margin required), the verdict is *borderline*: both readings
are said, with why.

Half-power points must lie inside the data: a point within :data:`EDGE_FRACTION` of
the half-power bandwidth of the first or last speed of the data is "at the edge" (the
response beyond it is not seen, so the bandwidth may be cut short); its AF is then
taken as a range of +/- :data:`EDGE_ALLOWANCE` (both our own, common practice, no
source: a sweep truncated just past N2 read AF 2.64-2.72 for a true 2.40).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from rundash.analysis.transient_model import unbalance_half_power_af

#: a half-power point closer than this fraction of (N2 - N1) to the data's end is at the edge
EDGE_FRACTION = 0.25
#: the AF of a half-power reading at the edge of the data is taken within +/- this fraction
EDGE_ALLOWANCE = 0.15


@dataclass(frozen=True)
class AFReading:
    """One reading of a critical's AF: ``label`` says how, ``zeta`` the damping ratio
    it goes with (for a damping exemption), ``None`` when it gives none."""

    label: str
    af: float
    zeta: float | None = None


def half_power_at_edge(crit, data_range_rpm) -> str:
    """Why the half-power points lie too near the data's ends, or ''."""
    hp = crit.half_power
    if data_range_rpm is None or hp is None or not hp.determinable:
        return ""
    lo, hi = float(data_range_rpm[0]), float(data_range_rpm[1])
    gap = EDGE_FRACTION * (hp.n2_rpm - hp.n1_rpm)
    why = []
    if hp.n1_rpm - lo < gap:
        why.append(f"N1 {hp.n1_rpm:.0f} rpm is within {gap:.0f} rpm of the data's first speed "
                   f"{lo:.0f} rpm")
    if hi - hp.n2_rpm < gap:
        why.append(f"N2 {hp.n2_rpm:.0f} rpm is within {gap:.0f} rpm of the data's last speed "
                   f"{hi:.0f} rpm")
    if not why:
        return ""
    return ("; ".join(why) + f" ({100 * EDGE_FRACTION:g} % of the half-power bandwidth "
            f"required inside the data): the half-power AF is taken within "
            f"+/- {100 * EDGE_ALLOWANCE:g} %")


def af_readings(crit, data_range_rpm=None) -> list[AFReading]:
    """The readings of a critical's AF (module doc), the governing one first."""
    fit = crit.fit
    zeta = fit.zeta if fit is not None else None
    out = []
    if crit.af_governing is not None:
        out.append(AFReading(f"governing ({crit.af_method})", float(crit.af_governing), zeta))
    hp = crit.half_power
    if hp is not None and hp.determinable and hp.af is not None:
        if half_power_at_edge(crit, data_range_rpm):
            out += [AFReading("half-power at the data's edge, low end", hp.af * (1 - EDGE_ALLOWANCE),
                              zeta),
                    AFReading("half-power at the data's edge, high end",
                              hp.af * (1 + EDGE_ALLOWANCE), zeta)]
        elif crit.af_method != "half-power":
            out.append(AFReading("half-power", float(hp.af), zeta))
    if fit is not None and fit.zeta > 0:
        sz = fit.zeta_std if math.isfinite(fit.zeta_std) else 0.0
        for k, word in ((0, "modal fit"), (-2, "modal fit, zeta - 2 sigma"),
                        (2, "modal fit, zeta + 2 sigma")):
            z = fit.zeta + k * sz
            if not z > 0 or (k and sz == 0):
                continue
            af = unbalance_half_power_af(z)
            if af is None:  # too heavily damped to have half-power points
                af = 0.5 / z
            out.append(AFReading(f"{word} (zeta {z:.3f}: half-power AF of the closed form)",
                                 float(af), z))
    return out


def borderline_reason(crit, readings, judge_one) -> str | None:
    """Why the verdict is borderline, or None when every reading gives one verdict.

    ``judge_one(af, zeta)`` returns ``(verdict, reason)`` of the rule for one reading.
    """
    judged = [(r, *judge_one(r.af, r.zeta)) for r in readings]
    passes = [j for j in judged if j[1] == "pass"]
    fails = [j for j in judged if j[1] == "fail"]
    if not passes or not fails:
        return None
    p = min(passes, key=lambda j: j[0].af)
    f = max(fails, key=lambda j: j[0].af)
    return (f"borderline: the verdict turns on the AF reading. {p[0].label}: AF "
            f"{p[0].af:.2f}, pass ({p[2]}). {f[0].label}: AF {f[0].af:.2f}, fail ({f[2]}). "
            "Confirm the damping (a run with more data beyond the critical, or the OEM's "
            "rotordynamic analysis) before relying on either")
