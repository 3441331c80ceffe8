"""Sweep-rate-free critical speeds: transient modal identification of 1X vectors.

A run-up or coast-down crosses a critical speed at a finite rate, so the 1X vectors are not
the steady-state response the API 684 half-power reading assumes: the apparent peak moves
in the sweep direction, drops and widens (F. M. Lewis 1932). This module fits a modal
model to the measured vectors *through the run's own speed-time history* and reports the
steady-state critical speed and amplification factor of the fitted model, which no longer
depend on the sweep rate.

This module is the run-level driver (:func:`identify_modes`: clusters of candidate
criticals, model order, the joint fit, bootstrap and run-direction refits); the model is
:mod:`rundash.analysis.transient_model` and the fit :mod:`rundash.analysis.transient_fit`.
Their public names are re-exported here.

References
----------
F. M. Lewis, "Vibration during acceleration through a critical speed", Trans. ASME 54
(1932) 253-261 (the sweep shift).
American Petroleum Institute, API RP 684, 2nd ed., 2005 (half-power amplification factor;
edition from memory).
G. H. Golub and V. Pereyra, "The differentiation of pseudo-inverses and nonlinear least
squares problems whose variables separate", SIAM J. Numer. Anal. 10 (1973) 413-432.
W. T. Thomson and M. D. Dahleh, "Theory of Vibration with Applications", 5th ed., Prentice
Hall, 1998, sec. 3.3 (rotating unbalance).
X. Shao, "The dependent wild bootstrap", J. American Statistical Association 105 (2010)
218-235.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Sequence

import numpy as np

from rundash.analysis.transient_fit import ZETA_BOUNDS, fit_transient
from rundash.analysis.transient_model import (
    PRE_ROLL_DECAYS, ProbeReading, SweepHistory, TransientFit, TransientMode, mode_response,
    sweep_history, unbalance_half_power_af, unbalance_peak_ratio,
)
from rundash.errors import AnalysisError, invalid_value

__all__ = [
    "SweepHistory", "sweep_history", "mode_response", "unbalance_peak_ratio",
    "unbalance_half_power_af", "TransientMode", "ProbeReading", "TransientFit",
    "fit_transient", "Cluster", "RunModes", "DirectionFit", "identify_modes", "fit_speed_range",
    "ZETA_BOUNDS",
    "PRE_ROLL_DECAYS", "MIN_GAIN", "METHOD",
]

#: Smallest relative drop of the weighted misfit for one more mode to count.
MIN_GAIN = 0.10
#: Group means in the model-order fits of one cluster (the final fit uses more).
ORDER_GROUPS = 300
#: Largest half-width of a cluster's band, as a fraction of its speed (see identify_modes).
BAND_W_MAX = 0.6
#: Two modes whose shapes across the probes correlate above this are one mode (our own
#: threshold: a split's modes along different directions correlate far less).
SAME_SHAPE = 0.98


# --------------------------------------------------------------------------- one run
@dataclass(frozen=True)
class DirectionFit:
    """The run's modes refitted to one run direction only (no bootstrap)."""

    direction: str
    fn_rpm: tuple[float, ...]
    zeta: tuple[float, ...]
    fn_std_rpm: tuple[float | None, ...]
    n_blocks: int


@dataclass(frozen=True)
class Cluster:
    """The modes of one speed band of the run's modal model.

    Attributes
    ----------
    band_rpm : (float, float)
        The band of this cluster (its modes' readings are taken there).
    mode_index : tuple of int
        Indices into :attr:`RunModes.fit` ``.modes`` of the modes in this band.
    candidates_rpm : tuple of float
        The quasi-steady readings that seeded it.
    tried : tuple of str
        One sentence per model order tried (misfit in the band, F statistic, decision).
    unresolved_split : bool
        One more mode fitted significantly better in this band but could not be resolved
        (modes too close or too poorly determined): a split critical is likely here but not
        separable from these data.
    conservative_af : float or None
        With an unresolved split: the largest AF among the candidate modes.
    good : bool
        Whether the sweep-free readings of this band may govern (see :func:`identify_modes`).
    notes : tuple of str
        Why not good, the unresolved split, the run-direction agreement.
    agreement : str
        ``'agree'``, ``'differ'`` or ``''`` (fewer than two run directions).
    """

    band_rpm: tuple[float, float]
    mode_index: tuple[int, ...]
    candidates_rpm: tuple[float, ...]
    tried: tuple[str, ...]
    unresolved_split: bool
    conservative_af: float | None
    good: bool
    notes: tuple[str, ...]
    agreement: str = ""


@dataclass(frozen=True)
class RunModes:
    """The run's modal model: one set of modes shared by every probe and run direction.

    ``fit`` is the joint fit (None when nothing could be fitted), ``clusters`` its speed
    bands, ``directions`` the modes refitted to each run direction alone.
    """

    fit: TransientFit | None
    clusters: tuple[Cluster, ...]
    directions: tuple[DirectionFit, ...]
    n_probes: int
    method: str = ""

    @property
    def modes(self) -> tuple[TransientMode, ...]:
        return self.fit.modes if self.fit is not None else ()

    def cluster_of(self, speed_rpm: float) -> Cluster | None:
        """The cluster whose band holds ``speed_rpm`` (None outside every band)."""
        for c in self.clusters:
            if c.band_rpm[0] <= speed_rpm <= c.band_rpm[1]:
                return c
        return None

    def readings(self, probe: int) -> list[ProbeReading]:
        """Sweep-free readings of one probe, by speed."""
        if self.fit is None:
            return []
        return sorted((r for r in self.fit.readings if r.probe == probe), key=lambda r: r.speed_rpm)


METHOD = ("transient modal identification: single-degree-of-freedom unbalance modes shared "
          "by every probe, integrated through the run's measured speed-time history "
          "(exact per block of whole revolutions) and fitted by variable projection; the "
          "steady-state critical is the peak of the fitted model's steady response and its "
          "AF the API 684 half-power AF of that response (F. M. Lewis 1932 for the sweep "
          "shift the fit removes)")


def _distinct(cands: list[tuple[float, float]], tol: float = 0.02):
    out: list[list[tuple[float, float]]] = []
    for c in sorted(cands):
        if out and c[0] <= out[-1][0][0] * (1 + tol):
            out[-1].append(c)
        else:
            out.append([c])
    return [(float(np.median([f for f, _ in g])), float(np.median([z for _, z in g]))) for g in out]


def _clusters(distinct, gap_ratio: float):
    groups: list[list[tuple[float, float]]] = []
    for c in distinct:
        if groups and c[0] <= groups[-1][-1][0] * gap_ratio:
            groups[-1].append(c)
        else:
            groups.append([c])
    return groups


def _modes_in(fit: TransientFit, band) -> list[TransientMode]:
    return [m for m in fit.modes if band[0] <= m.fn_rpm <= band[1]]


def _guards(fit: TransientFit, band, n_expected: int) -> str:
    """Why the modes of ``band`` in a model are not acceptable ('' when they are)."""
    ms = _modes_in(fit, band)
    if len(ms) != n_expected:
        out = [m for m in fit.modes if not band[0] <= m.fn_rpm <= band[1]]
        far = min(out, key=lambda m: min(abs(m.fn_rpm - band[0]), abs(m.fn_rpm - band[1]))) if out else None
        return (f"a mode ran out of the band (to {far.fn_rpm:.0f} rpm)" if far is not None
                else "a mode ran out of the band")
    for m in ms:
        if m.zeta <= ZETA_BOUNDS[0] * 1.25 or m.zeta >= ZETA_BOUNDS[1] * 0.95:
            return f"a damping ratio ran to its bound ({m.zeta:.3g})"
        if m.fn_std_fit_rpm is None or not math.isfinite(m.fn_std_fit_rpm):
            return f"the mode at {m.fn_rpm:.0f} rpm is not determined (singular fit)"
    for a, b in zip(ms[:-1], ms[1:]):
        sig = math.hypot(a.fn_std_fit_rpm, b.fn_std_fit_rpm)
        gap = b.fn_rpm - a.fn_rpm
        if not (gap > 3.0 * sig and gap > 0.002 * a.fn_rpm):
            return (f"modes at {a.fn_rpm:.0f} and {b.fn_rpm:.0f} rpm are not separated "
                    f"(gap {gap:.0f} rpm, uncertainty {sig:.0f} rpm)")
    top = np.max(np.abs(fit.steady(np.linspace(band[0], band[1], 801))), axis=1)
    for m in ms:
        xp = 1.0 / (2.0 * m.zeta * math.sqrt(max(1.0 - m.zeta ** 2, 1e-12)))
        share = float(np.max(np.abs(np.asarray(m.participation)) * xp / np.maximum(top, 1e-300)))
        if share < 0.05:
            return f"the mode at {m.fn_rpm:.0f} rpm carries only {100 * share:.0f} % of the response"
    return ""


def _same_shape(fit: TransientFit, band, limit: float = SAME_SHAPE) -> str:
    """Why the modes of ``band`` are one mode, not a split ('' when they are not): with
    two or more probes, two modes whose complex shapes across the probes are parallel
    (normalised correlation above ``limit``) cannot be told apart by the probes; a
    second mode of the same shape absorbs a departure of the response from the model's
    line shape (seen at very high signal-to-noise ratios), not a split, whose modes lie
    along different directions."""
    if fit.n_probes < 2:
        return ""
    ms = _modes_in(fit, band)
    for i, a in enumerate(ms):
        for b in ms[i + 1:]:
            ra, rb = np.asarray(a.participation), np.asarray(b.participation)
            den = float(np.linalg.norm(ra) * np.linalg.norm(rb))
            corr = abs(complex(np.vdot(ra, rb))) / den if den > 0 else 1.0
            if corr > limit:
                return (f"the modes at {a.fn_rpm:.0f} and {b.fn_rpm:.0f} rpm have the same shape "
                        f"across the probes (correlation {corr:.3f}): one mode whose response "
                        f"departs from the model, not a split")
    return ""


def _best(args, kw, inits, weights, max_nfev=40):
    best = None
    for init in inits:
        try:
            f = fit_transient(*args, initial=sorted(init), _weights=weights, max_nfev=max_nfev, **kw)
        except (AnalysisError, np.linalg.LinAlgError, ValueError):
            continue
        if best is None or f.rss_weighted < best.rss_weighted:
            best = f
    return best


def fit_speed_range(candidates: Sequence[tuple[float, float | None]]) -> tuple[float, float]:
    """The speeds (rpm) that every band :func:`identify_modes` fits with these candidates
    lies within: a cluster's band reaches at most ``BAND_W_MAX`` of its lowest and highest
    candidate speed beyond them (merged speeds are medians, inside the candidates' range)."""
    f = [float(c[0]) for c in candidates if math.isfinite(float(c[0]))]
    if not f:
        return (math.inf, -math.inf)
    return (min(f) * (1.0 - BAND_W_MAX), max(f) * (1.0 + BAND_W_MAX))


def identify_modes(time_s, speed_rpm, vectors, *, candidates: Sequence[tuple[float, float | None]],
                   revs_per_block: int = 1, rev_index=None, masks: dict | None = None,
                   n_boot: int = 30, seed: int = 0, max_modes: int = 3,
                   gap_ratio: float = 1.25, conjugate_part: bool = True,
                   residual: str = "linear", blocks=None) -> RunModes:
    """One modal model for a run: every probe, every run direction, one set of modes.

    Steps: (1) the quasi-steady readings in ``candidates`` (e.g. every probe's critical
    speeds from :func:`rundash.analysis.criticals.find_criticals`) are merged within 2 %
    and grouped into clusters (a speed ratio above ``gap_ratio`` between neighbours starts
    a new one); each cluster's band is ``[lowest (1 - w), highest (1 + w)]``,
    ``w = 5 zeta + 0.08`` clipped to 0.12-0.6, cut at the geometric middle to a
    neighbouring cluster; (2) each cluster gets one mode from a fit in its own band, then
    all clusters' modes are fitted jointly over the union of the bands
    (:func:`fit_transient`: every probe at once); (3) cluster by cluster, in its band with
    the other clusters' modes held, a model with one more mode (several starts: the
    candidates and pairs around the existing mode) replaces it when it lowers the weighted
    misfit by more
    than ``ln(n)`` per added parameter in units of the residual variance (an F test at the
    Schwarz/BIC threshold) and by at least ``MIN_GAIN`` (10 %), and its modes are
    acceptable (and, with two or more probes, not of parallel shapes across the probes,
    :func:`_same_shape`: then it is one mode, not a split): inside the band, damping not
    at a bound, separated by more than three
    sigma and 0.2 %, each carrying at least 5 % of the response; when the misfit test
    passes but the modes are not acceptable, the cluster keeps fewer modes and reports an
    *unresolved split* with the largest AF among the candidate modes (the conservative
    reading); (4) the chosen model is refitted with a bootstrap and to each run direction.

    A cluster is *good* (its sweep-free readings may govern) when the optimiser converged,
    the misfit in its band is at most twice the noise and the relative misfit of the fit at
    most 0.2, each of its modes has a bootstrap sigma of at most 1 % of its frequency and
    30 % of its damping ratio, the data cover each mode's peak +- max(zeta, 0.03) fn, and,
    with both run directions, their natural frequencies agree within 1 % or three sigma.

    Parameters
    ----------
    time_s, speed_rpm : array_like, shape (n,)
        Block times and speeds of the whole run (every segment).
    vectors : array_like of complex, shape (P, n)
        1X phasors of every probe (slow-roll compensated where that applies); complex64
        is kept so, each fit taking its own blocks' vectors as complex128 (the same fit).
    candidates : sequence of (speed_rpm, zeta or None)
        Quasi-steady readings; zeta None means 0.05.
    revs_per_block, rev_index :
        As :func:`sweep_history`.
    masks : dict of str to bool array, optional
        Blocks of each run direction (``'run-up'``, ``'coast-down'``) for the direction
        refits (done with two or more directions); the joint fit uses every block in the
        bands.
    n_boot, seed :
        Bootstrap replicates and seed for the chosen model.
    max_modes : int
        Largest number of modes per cluster.
    blocks : array_like of int, shape (m,), optional
        As :func:`fit_transient`: the blocks the columns of ``vectors`` belong to. Every
        block in :func:`fit_speed_range` of the candidates is enough for the same result
        as with every block's vectors.

    Returns
    -------
    RunModes
    """
    t = np.asarray(time_s, dtype=float)
    s = np.asarray(speed_rpm, dtype=float)
    v = np.asarray(vectors)
    if v.dtype != np.complex64:  # complex64 is held so (each fit takes its blocks' vectors)
        v = v.astype(complex, copy=False)
    if v.ndim == 1:
        v = v[None, :]
    n_cols = t.size if blocks is None else len(blocks)
    if v.ndim != 2 or v.shape[1] != n_cols or s.shape != t.shape:
        raise AnalysisError(invalid_value("vectors", f"shape {v.shape}", f"(P, {n_cols})"))
    if not (isinstance(max_modes, (int, np.integer)) and 1 <= max_modes <= 4):
        raise AnalysisError(invalid_value("max_modes", max_modes, "an integer from 1 to 4"))
    s_lo, s_hi = float(np.min(s)), float(np.max(s))
    cands = []
    for c in candidates:
        f, z = float(c[0]), c[1]
        z = 0.05 if z is None or not math.isfinite(z) else float(np.clip(z, 0.01, 0.5))
        if math.isfinite(f) and s_lo < f < s_hi:
            cands.append((f, z))
    groups = _clusters(_distinct(cands), gap_ratio)
    args = (t, s, v)
    base = dict(revs_per_block=revs_per_block, rev_index=rev_index, conjugate_part=conjugate_part,
                residual=residual, blocks=blocks)
    bands = []
    for gi, g in enumerate(groups):
        w = float(np.clip(5.0 * max(z for _, z in g) + 0.08, 0.12, BAND_W_MAX))
        lo, hi = g[0][0] * (1 - w), g[-1][0] * (1 + w)
        if gi > 0:
            lo = max(lo, math.sqrt(groups[gi - 1][-1][0] * g[0][0]))
        if gi + 1 < len(groups):
            hi = min(hi, math.sqrt(g[-1][0] * groups[gi + 1][0][0]))
        bands.append((max(lo, s_lo), min(hi, s_hi)))
    # (2) one mode per cluster from its own band, then jointly
    starts, keep = [], []
    for g, band in zip(groups, bands):
        if band[1] <= band[0]:
            continue
        f1 = _best(args, dict(base, band_rpm=band), [[c] for c in g], None, max_nfev=60)
        if f1 is not None and band[0] <= f1.modes[0].fn_rpm <= band[1]:
            starts.append((f1.modes[0].fn_rpm, f1.modes[0].zeta))
            keep.append((g, band))
    if not keep:
        return RunModes(None, (), (), int(v.shape[0]), METHOD)
    union = (min(b[0] for _, b in keep), max(b[1] for _, b in keep))
    kw = dict(base, band_rpm=union, max_groups=500 * len(keep) + 300)
    try:
        cur = fit_transient(*args, initial=starts, **kw)
    except (AnalysisError, np.linalg.LinAlgError, ValueError):
        return RunModes(None, (), (), int(v.shape[0]), METHOD)
    weights = cur.weights
    cur = _best(args, kw, [[(m.fn_rpm, m.zeta) for m in cur.modes]], weights, max_nfev=None) or cur
    # (3) model order, cluster by cluster: fits in the cluster's band with the other
    # clusters' modes held (their tails are not linear in speed)
    info = []
    final_modes: list[tuple[float, float]] = []
    for g, band in keep:
        tried, unresolved, cons_af, why_unres = [], False, None, ""
        inside = [(m.fn_rpm, m.zeta) for m in _modes_in(cur, band)]
        others = [(m.fn_rpm, m.zeta) for m in cur.modes if not band[0] <= m.fn_rpm <= band[1]]
        # model order in a cluster's band on coarser group means (all of its fits alike,
        # so the F test compares like with like); the chosen model is refitted in full
        kwl = dict(base, band_rpm=band, fixed=others, max_groups=ORDER_GROUPS)
        wl = (cur.weights[0], None)
        curl = _best(args, kwl, [inside], wl, max_nfev=60) if inside else None
        if curl is None:
            info.append((g, band, ("no mode could be fitted in the band",), False, None, ""))
            continue
        n_in = len(curl.modes)
        tried.append(f"{n_in} mode{'s' if n_in != 1 else ''}: misfit in the band "
                     f"{curl.misfit_ratio:.2f} x the noise")
        while n_in < max_modes:
            if curl.misfit_ratio < math.sqrt(1.0 / (1.0 - MIN_GAIN)) * 0.995:
                tried.append(f"{n_in + 1} modes not tried: the misfit is within "
                             f"{100 * (curl.misfit_ratio - 1):+.1f} % of the noise")
                break
            nxt = _best(args, kwl, _more_inits(g, [(m.fn_rpm, m.zeta) for m in curl.modes]), wl)
            if nxt is None:
                break
            r0, r1 = curl.rss_weighted, nxt.rss_weighted
            dp = nxt.n_par - curl.n_par
            s2 = r1 / max(nxt.n_obs - nxt.n_par, 1)
            F = (r0 - r1) / max(dp, 1) / max(s2, 1e-300)
            thr = math.log(max(nxt.n_obs, 3))
            gain = (r0 - r1) / max(r0, 1e-300)
            # the F test alone takes small systematic misfits (the sampled speed history,
            # a real rotor's departures from modal form) for modes; a real extra mode
            # removed 98-99.9 % of the misfit in the tests, a spurious one 0.1-3 %
            passes = F > thr and gain >= MIN_GAIN
            why = _guards(nxt, band, n_in + 1) if passes else ""
            same = _same_shape(nxt, band) if passes and not why else ""
            got = ", ".join(f"{m.fn_rpm:.0f}" for m in nxt.modes)
            tried.append(f"{n_in + 1} modes ({got} rpm): misfit {100 * gain:.1f} % lower, "
                         f"F {F:.3g} against {thr:.3g}"
                         + (f"; not taken: {same}" if same else
                            "; taken" if passes and not why else
                            (f"; not taken: {why}" if why else "; not taken: no significant gain")))
            if not passes or same:
                break
            if why:
                unresolved, why_unres = True, why
                afs = [m.af for m in (*_modes_in(nxt, band), *curl.modes)
                       if m.af is not None and m.zeta < ZETA_BOUNDS[1] * 0.95]
                cons_af = max(afs) if afs else None
                break
            curl, n_in = nxt, n_in + 1
        final_modes += [(m.fn_rpm, m.zeta) for m in curl.modes]
        info.append((g, band, tuple(tried), unresolved, cons_af, why_unres))
    # (4) final joint fit with bootstrap, and each run direction alone
    init = final_modes or [(m.fn_rpm, m.zeta) for m in cur.modes]
    try:
        fin = fit_transient(*args, initial=init, n_boot=n_boot, seed=seed, **kw)
    except (AnalysisError, np.linalg.LinAlgError, ValueError):
        fin = cur
    fin = replace(fin, readings=tuple(r for r in fin.readings
                                       if any(b[0] <= r.speed_rpm <= b[1] for _, b in keep)))
    dirs = []
    w_fin = (fin.weights[0], None)
    # each run direction alone, to compare them (with one direction there is nothing to
    # compare: its refit would repeat the joint fit)
    for name, mk in (masks or {}).items() if len(masks or {}) >= 2 else ():
        mk = np.asarray(mk, dtype=bool)
        sel = mk & (s >= union[0]) & (s <= union[1])
        if np.count_nonzero(sel) < 30:
            continue
        try:
            fd = fit_transient(*args, initial=init, select=mk, reweight=False, _weights=w_fin, **kw)
        except (AnalysisError, np.linalg.LinAlgError, ValueError):
            continue
        if len(fd.modes) == len(fin.modes):
            dirs.append((DirectionFit(name, tuple(m.fn_rpm for m in fd.modes),
                                      tuple(m.zeta for m in fd.modes),
                                      tuple(m.fn_std_fit_rpm for m in fd.modes), fd.n_blocks),
                         s[sel]))
    clusters = tuple(_judge(fin, g, band, tried, unresolved, cons_af, why_unres, s, dirs)
                     for g, band, tried, unresolved, cons_af, why_unres in info)
    return RunModes(fin, clusters, tuple(d for d, _ in dirs), int(v.shape[0]), METHOD)


def _band_ratio(fit: TransientFit, band) -> float:
    """Misfit in a band over the noise from second differences (1: only noise is left)."""
    return fit.misfit_ratio_in(band)


def _more_inits(g, inside):
    """Starting sets with one more mode than ``inside`` in a cluster seeded by ``g``."""
    out = []
    if len(inside) == 1:
        fn, z = inside[0]
        if len(g) >= 2:
            out.append([g[0], g[-1]])
            out += [[a, b] for a, b in zip(g[:-1], g[1:])][:2]
        for d in (0.7 * z, 2.0 * z):
            d = max(d, 0.005)
            out.append([(fn * (1 - d), z), (fn * (1 + d), z)])
    else:
        K = len(inside)
        if len(g) >= K + 1:
            idx = np.linspace(0, len(g) - 1, K + 1).round().astype(int)
            out.append([g[i] for i in idx])
        for c in g:
            if all(abs(c[0] - f) > 0.02 * f for f, _ in inside):
                out.append(inside + [c])
    return out


def _covers(speed: np.ndarray, modes) -> bool:
    for m in modes:
        pk = m.peak_speed_rpm or m.fn_rpm
        d = max(m.zeta, 0.03) * m.fn_rpm
        if speed.size == 0 or not (np.min(speed) <= pk - d and np.max(speed) >= pk + d):
            return False
    return True


def _judge(fit, g, band, tried, unresolved, cons_af, why_unres, speed, dirs) -> Cluster:
    idx = tuple(i for i, m in enumerate(fit.modes) if band[0] <= m.fn_rpm <= band[1])
    ms = [fit.modes[i] for i in idx]
    notes = []
    if not fit.success:
        notes.append(f"the optimiser did not converge ({fit.message})")
    ratio = _band_ratio(fit, band)
    if not ratio <= 2.0:
        notes.append(f"the model leaves {ratio:.1f} x the noise unexplained in the band")
    if not fit.relative_error <= 0.2:
        notes.append(f"relative misfit {100 * fit.relative_error:.0f} % (at most 20 %)")
    if not ms:
        notes.append("no mode of the fitted model lies in the band")
    for m in ms:
        if m.fn_std_rpm is not None and m.fn_std_rpm > 0.01 * m.fn_rpm:
            notes.append(f"mode at {m.fn_rpm:.0f} rpm: frequency uncertain (+-{m.fn_std_rpm:.0f} rpm)")
        if m.zeta_std is not None and m.zeta_std > 0.3 * m.zeta:
            notes.append(f"mode at {m.fn_rpm:.0f} rpm: damping uncertain (zeta {m.zeta:.3f} "
                         f"+-{m.zeta_std:.3f})")
    in_band = speed[(speed >= band[0]) & (speed <= band[1])]
    if ms and not _covers(in_band, ms):
        notes.append("the data do not cover each mode's peak on both sides")
    agreement = ""
    both = [(d, sp) for d, sp in dirs if _covers(sp[(sp >= band[0]) & (sp <= band[1])], ms)]
    if len(both) >= 2 and ms:
        (a, _), (b, _) = both[0], both[1]
        ok, txt = True, []
        for k in idx:
            d = abs(a.fn_rpm[k] - b.fn_rpm[k])
            sig = math.hypot(a.fn_std_rpm[k] or 0.0, b.fn_std_rpm[k] or 0.0)
            ok &= d <= max(0.01 * a.fn_rpm[k], 3.0 * sig)
            txt.append(f"{a.fn_rpm[k]:.0f} vs {b.fn_rpm[k]:.0f} rpm")
        agreement = "agree" if ok else "differ"
        notes.append(f"{a.direction} and {b.direction} fitted alone: {'; '.join(txt)} ({agreement})")
        if not ok:
            notes.append("the run directions disagree beyond 1 % and three sigma")
    if unresolved:
        notes.append(f"unresolved split: one more mode fits significantly better but {why_unres}"
                     + (f"; the conservative AF {cons_af:.2f} is the largest of the candidate "
                        f"modes" if cons_af is not None else ""))
    bad = [n for n in notes if not (n.startswith("unresolved split") or " fitted alone: " in n)]
    return Cluster(band, idx, tuple(f for f, _ in g), tried, unresolved, cons_af, not bad,
                   tuple(notes), agreement)
