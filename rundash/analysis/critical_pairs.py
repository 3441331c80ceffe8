"""Critical speeds of one probe paired with another's: the X and Y probes of one
bearing (:func:`combine_bearing`, a possible split critical) and the run-up against the
coast-down of one probe (:func:`compare_directions`)."""

from __future__ import annotations

from dataclasses import dataclass

from rundash.analysis.criticals import Critical
from rundash.errors import require_positive

__all__ = ["CriticalPair", "combine_bearing", "compare_directions"]


@dataclass(frozen=True)
class CriticalPair:
    """Two criticals matched by speed (either may be missing).

    ``speed_difference_pct = 100 (b - a) / a`` and ``af_difference = af_b - af_a`` when
    both exist; ``agreement`` is ``'agree'``, ``'differ'`` or ``'one side only'``.
    """

    a: Critical | None
    b: Critical | None
    speed_difference_pct: float | None
    af_difference: float | None
    agreement: str
    note: str


def _pair(first, second, tol_pct, af_tol, names):
    left, right = list(first), list(second)
    pairs = []
    used = set()
    for ca in left:
        best, best_d = None, None
        for j, cb in enumerate(right):
            if j in used:
                continue
            d = 100.0 * (cb.speed_rpm - ca.speed_rpm) / ca.speed_rpm
            if abs(d) <= tol_pct and (best_d is None or abs(d) < abs(best_d)):
                best, best_d = j, d
        if best is None:
            pairs.append((ca, None, None))
        else:
            used.add(best)
            pairs.append((ca, right[best], best_d))
    pairs += [(None, cb, None) for j, cb in enumerate(right) if j not in used]
    out = []
    for ca, cb, d in pairs:
        if ca is None or cb is None:
            only = names[0] if cb is None else names[1]
            c = ca or cb
            out.append(CriticalPair(ca, cb, None, None, "one side only",
                                    f"critical at {c.speed_rpm:.0f} rpm seen by {only} only"))
            continue
        daf = (cb.af_governing - ca.af_governing
               if ca.af_governing is not None and cb.af_governing is not None else None)
        ok = abs(d) <= tol_pct / 2 and (daf is None or abs(daf) <= af_tol * max(ca.af_governing, 1))
        note = (f"{names[0]} {ca.speed_rpm:.0f} rpm, {names[1]} {cb.speed_rpm:.0f} rpm "
                f"({d:+.1f} %)" + (f", AF difference {daf:+.2f}" if daf is not None else ""))
        out.append(CriticalPair(ca, cb, d, daf, "agree" if ok else "differ", note))
    return tuple(sorted(out, key=lambda p: (p.a or p.b).speed_rpm))


def combine_bearing(criticals_x, criticals_y, *, match_tolerance_pct: float = 5.0,
                    af_tolerance: float = 0.25, split_window_pct: float = 20.0
                    ) -> tuple[CriticalPair, ...]:
    """Combine the criticals of the X and Y probes of one bearing.

    Criticals are matched by speed within ``match_tolerance_pct``; a pair agrees when the
    speeds differ by at most half that and the AFs by at most ``af_tolerance`` of the X
    AF. An X-only and a Y-only critical within ``split_window_pct`` of each other are
    noted as a possible split critical (stiffer support in one direction; common
    practice, no source).
    """
    require_positive("match_tolerance_pct", match_tolerance_pct, "a positive percentage")
    pairs = list(_pair(criticals_x, criticals_y, match_tolerance_pct, af_tolerance, ("X", "Y")))
    # indices, not the pairs themselves: a pair's note grows with each partner, and one
    # X-only critical may sit in the split window of two Y-only ones (or the reverse)
    xs = [k for k, p in enumerate(pairs) if p.b is None]
    ys = [k for k, p in enumerate(pairs) if p.a is None]
    notes = {k: [] for k in xs + ys}
    for kx in xs:
        cx = pairs[kx].a
        for ky in ys:
            cy = pairs[ky].b
            d = 100.0 * (cy.speed_rpm - cx.speed_rpm) / cx.speed_rpm
            if abs(d) <= split_window_pct:
                notes[kx].append((cy.speed_rpm, d))
                notes[ky].append((cx.speed_rpm, d))
    for k, partners in notes.items():
        if partners:
            p = pairs[k]
            pairs[k] = CriticalPair(p.a, p.b, None, None, p.agreement, p.note + "".join(
                f"; possible split critical with the other probe's {sp:.0f} rpm ({d:+.1f} %), "
                "e.g. anisotropic supports" for sp, d in partners))
    return tuple(pairs)


def compare_directions(run_up, coast_down, *, match_tolerance_pct: float = 5.0,
                       af_tolerance: float = 0.25) -> tuple[CriticalPair, ...]:
    """Match run-up and coast-down criticals of one probe and report their differences.

    ``a`` is the run-up critical, ``b`` the coast-down one. A finite sweep rate shifts the
    apparent peak in the sweep direction (F. M. Lewis, Trans. ASME, 1932), so a run-up
    peak reading above the coast-down one is expected when sweeps are fast.
    """
    require_positive("match_tolerance_pct", match_tolerance_pct, "a positive percentage")
    return _pair(run_up, coast_down, match_tolerance_pct, af_tolerance, ("run-up", "coast-down"))
