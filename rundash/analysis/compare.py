"""Run comparison: what changed between runs of one machine, and is the change real?

Pure numpy/scipy. Inputs are one probe's per-revolution 1X phasors in one run direction
(see :mod:`rundash.conventions`: ``c = |c| exp(-i lag)``), as
:func:`rundash.analysis.criticals.find_criticals` takes them. Every number compared
carries a one-sigma uncertainty from a bootstrap over revolutions, and a change counts
as *significant* only when it is larger than its uncertainty (the rule of
:mod:`rundash.analysis.shifts`), and is
*flagged* (counted as a change) only when it is significant and at least its engineering
floor (:mod:`rundash.analysis.significance`, each floor with its source).

Public functions
----------------
estimate_curve      criticals of one probe and direction, with bootstrap uncertainties
compare_curves      match the criticals of two estimates and report their shifts
vector_mean         mean of complex vectors with its standard error (e.g. slow roll)
compare_vectors     change of a mean vector (e.g. the slow-roll vector) between runs
shift               one quantity's change with its combined uncertainty

The pieces live by concern: :mod:`rundash.analysis.shifts` (one quantity's change and
the significance rule, mean vectors), :mod:`rundash.analysis.curve_estimate` (the
bootstrap estimate of a curve and its uncertainty model); this module matches the
criticals of two estimates. Every public name above is importable from here.
"""

from __future__ import annotations

from dataclasses import dataclass

from rundash.analysis.curve_estimate import (
    CriticalEstimate,
    CurveEstimate,
    PhasePoint,
    estimate_curve,
)
from rundash.analysis.shifts import (
    K_SIGMA,
    Shift,
    VectorChange,
    VectorMean,
    compare_vectors,
    shift,
    vector_mean,
)
from rundash.analysis.significance import amplitude_floor, af_floor, phase_floor, speed_floor
from rundash.errors import require_positive

__all__ = [
    "K_SIGMA", "SWEEP_RATE_TOLERANCE", "CriticalEstimate", "CriticalMatch", "CurveComparison",
    "CurveEstimate", "PhasePoint", "Shift", "VectorChange", "VectorMean", "compare_curves",
    "compare_vectors", "estimate_curve", "shift", "vector_mean",
]

#: Sweep rates of two runs differing by more than this fraction get a note.
SWEEP_RATE_TOLERANCE = 0.25


# ----------------------------------------------------------------------------- results
@dataclass(frozen=True)
class CriticalMatch:
    """A critical of run ``a`` matched with one of run ``b`` (either may be missing)."""

    a: CriticalEstimate | None
    b: CriticalEstimate | None
    speed: Shift | None
    af: Shift | None
    peak_amplitude: Shift | None
    changed: bool
    hints: tuple[str, ...]
    notes: tuple[str, ...]


@dataclass(frozen=True)
class CurveComparison:
    """Result of :func:`compare_curves`.

    ``like_with_like`` is False when the runs differ in direction or in sweep rate
    (``notes`` say how); ``verdict`` is ``'changed'`` when any shift is flagged
    (significant and at least its engineering floor), else ``'no significant change'``.
    """

    matches: tuple[CriticalMatch, ...]
    phase: tuple[Shift, ...]
    like_with_like: bool
    notes: tuple[str, ...]
    hints: tuple[str, ...]
    verdict: str



# ----------------------------------------------------------------------------- compare
def _hints(m_speed: Shift | None, m_af: Shift | None, m_peak: Shift | None) -> list[str]:
    hints = []
    if m_speed is not None and m_speed.flagged:
        if m_speed.delta < 0:
            hints.append(f"hint: the critical speed moved down {abs(m_speed.delta_pct):.1f} %: "
                         "a loss of stiffness is one possible cause (e.g. bearing clearance "
                         "growth, a softer support)")
        else:
            hints.append(f"hint: the critical speed moved up {m_speed.delta_pct:.1f} %: a "
                         "stiffer support or oil film is one possible cause (e.g. a tighter "
                         "clearance, a colder oil)")
    if m_af is not None and m_af.flagged:
        if m_af.delta > 0:
            hints.append(f"hint: the amplification factor rose from {m_af.a:.1f} to "
                         f"{m_af.b:.1f}: a loss of damping is one possible cause (e.g. worn "
                         "bearings, a changed oil film or seal)")
        else:
            hints.append(f"hint: the amplification factor fell from {m_af.a:.1f} to "
                         f"{m_af.b:.1f}: more damping, or a blunter peak from a faster sweep")
    if m_peak is not None and m_peak.flagged and m_peak.delta > 0:
        hints.append(f"hint: the peak 1X rose {m_peak.delta_pct:.0f} %: more unbalance or "
                     "less damping is a possible cause")
    return hints


def compare_curves(a: CurveEstimate, b: CurveEstimate, *,
                   match_tolerance_pct: float = 10.0, k: float = K_SIGMA,
                   sweep_rate_tolerance: float = SWEEP_RATE_TOLERANCE,
                   kind: str | None = None, amplitude_units: str = "") -> CurveComparison:
    """Match the criticals of two estimates (one probe, run ``a`` then run ``b``) and
    report each shift with its uncertainty.

    Criticals are matched by nearest speed within ``match_tolerance_pct`` of the ``a``
    critical (one-to-one, closest pairs first). For each match: the shift of the
    critical speed (rpm and %), of the governing AF (only when both runs used the same
    AF method, else the half-power AFs when both have one) and of the peak amplitude;
    phase points are compared at equal speeds. Every shift is judged by the rule of the
    significance rule (:mod:`rundash.analysis.shifts`: ``|d| > k sigma``).

    Like with like: when the directions differ (a run-up against a coast-down) or the
    sweep rates differ by more than ``sweep_rate_tolerance`` (fraction), ``notes`` say so
    and ``like_with_like`` is False; a finite sweep shifts the apparent peak in the sweep
    direction and blunts it (F. M. Lewis, Trans. ASME 54, 1932), a bias the bootstrap
    does not see.

    Returns
    -------
    CurveComparison

    Examples
    --------
    >>> import numpy as np
    >>> from rundash.analysis.amplification import unbalance_response
    >>> n = np.linspace(300, 6000, 3000)
    >>> def run(fn, z, seed):
    ...     rng = np.random.default_rng(seed)
    ...     e = 0.05 * (rng.standard_normal(n.size) + 1j * rng.standard_normal(n.size))
    ...     return estimate_curve(n, 5 * unbalance_response(n, fn, z) + e, n_boot=20, seed=seed)
    >>> cmp = compare_curves(run(3000, 0.08, 1), run(2910, 0.055, 2))
    >>> m, = cmp.matches
    >>> round(m.speed.delta_pct), m.speed.significant, m.af.significant, cmp.verdict
    (-3, True, True, 'changed')
    """
    require_positive("match_tolerance_pct", match_tolerance_pct, "a positive percentage")
    require_positive("sweep_rate_tolerance", sweep_rate_tolerance, "a positive fraction")
    notes: list[str] = []
    like = True
    if a.direction != b.direction:
        like = False
        notes.append(f"compares a {a.direction} with a {b.direction}: the sweep moves the "
                     "apparent peak in the sweep direction (up on a run-up, down on a "
                     "coast-down; F. M. Lewis 1932), so part of a speed shift may come from "
                     "the direction alone")
    ra, rb = a.sweep_rate_rpm_s, b.sweep_rate_rpm_s
    if ra and rb and abs(abs(rb) - abs(ra)) > sweep_rate_tolerance * abs(ra):
        like = False
        notes.append(f"sweep rates differ ({abs(ra):.0f} vs {abs(rb):.0f} rpm/s): the faster "
                     "sweep shifts the apparent peak further and lowers the AF, a bias the "
                     "uncertainty does not include")
    # one-to-one matching, closest pairs first
    cand = []
    for i, ca in enumerate(a.criticals):
        for j, cb in enumerate(b.criticals):
            d = abs(cb.speed_rpm - ca.speed_rpm) / ca.speed_rpm * 100.0
            if d <= match_tolerance_pct:
                cand.append((d, i, j))
    used_a, used_b, pairs = set(), set(), []
    for d, i, j in sorted(cand):
        if i in used_a or j in used_b:
            continue
        used_a.add(i)
        used_b.add(j)
        pairs.append((a.criticals[i], b.criticals[j]))
    pairs += [(c, None) for i, c in enumerate(a.criticals) if i not in used_a]
    pairs += [(None, c) for j, c in enumerate(b.criticals) if j not in used_b]
    pairs.sort(key=lambda p: (p[0] or p[1]).speed_rpm)

    matches = []
    all_hints: list[str] = []
    any_sig = False
    for ca, cb in pairs:
        if ca is None or cb is None:
            c = ca or cb
            side = "the earlier run" if cb is None else "the later run"
            if c.reproducible:
                note = (f"critical at {c.speed_rpm:.0f} rpm found in {side} only: a new or "
                        "lost critical, or one at the edge of a run's speed range")
            else:
                note = (f"critical at {c.speed_rpm:.0f} rpm found in {side} only, but found "
                        f"again in only {c.n_found} of {c.n_boot} bootstrap replicates: most "
                        "likely a noise bump, not counted as a change")
            matches.append(CriticalMatch(ca, cb, None, None, None, c.reproducible, (),
                                         (note,)))
            any_sig |= c.reproducible
            continue
        m_notes = []
        sp = shift("critical speed", ca.speed_rpm, cb.speed_rpm, ca.speed_std_rpm,
                   cb.speed_std_rpm, units="rpm", k=k, floor=speed_floor(ca.speed_rpm))
        if ca.af_method == cb.af_method:
            af = shift(f"AF ({ca.af_method})", ca.af, cb.af, ca.af_std, cb.af_std, k=k,
                       floor=af_floor(ca.af))
        elif ca.af_half_power is not None and cb.af_half_power is not None:
            af = shift("AF (half-power)", ca.af_half_power, cb.af_half_power,
                       ca.af_half_power_std, cb.af_half_power_std, k=k,
                       floor=af_floor(ca.af_half_power))
        else:
            af = shift(f"AF ({ca.af_method} vs {cb.af_method})", ca.af, cb.af, None, None, k=k)
            m_notes.append(f"the AFs come from different methods ({ca.af_method}, "
                           f"{cb.af_method}): their change is not judged")
        pk = shift("peak amplitude", ca.peak_amplitude, cb.peak_amplitude,
                   ca.peak_amplitude_std, cb.peak_amplitude_std, k=k, units=amplitude_units,
                   floor=amplitude_floor(kind, ca.speed_rpm))
        for c, which in ((ca, "earlier"), (cb, "later")):
            if not c.stable:
                m_notes.append(f"the {which} run's critical was found again in only "
                               f"{c.n_found} of {c.n_boot} bootstrap replicates: its "
                               "uncertainty is doubtful")
        changed = any(x is not None and x.flagged for x in (sp, af, pk))
        any_sig |= changed
        h = _hints(sp, af, pk)
        all_hints += h
        matches.append(CriticalMatch(ca, cb, sp, af, pk, changed, tuple(h), tuple(m_notes)))

    phase = []
    pb = {round(p.speed_rpm, 6): p for p in b.phase_points}
    for p in a.phase_points:
        q = pb.get(round(p.speed_rpm, 6))
        if q is None:
            continue
        ph = shift(f"lag at {p.speed_rpm:.0f} rpm", p.lag_deg, q.lag_deg, p.lag_std_deg,
                   q.lag_std_deg, units="deg", k=k, circular=True, floor=phase_floor())
        am = shift(f"1X at {p.speed_rpm:.0f} rpm", p.amplitude, q.amplitude, p.amplitude_std,
                   q.amplitude_std, k=k, units=amplitude_units,
                   floor=amplitude_floor(kind, p.speed_rpm))
        phase += [ph, am]
        any_sig |= ph.flagged or am.flagged
    return CurveComparison(tuple(matches), tuple(phase), like, tuple(notes), tuple(all_hints),
                           "changed" if any_sig else "no significant change")
