"""The run's modal model in the findings: sweep-free criticals beside the apparent ones.

Pipeline-level glue (no I/O) between :mod:`rundash.workflows.findings` and
:func:`rundash.analysis.transient.identify_modes`:

* :func:`identify_run` fits one modal model to the run: every proximity probe (or, on a
  machine with none, every seismic probe integrated to its displacement equivalent),
  every block of the run, both run directions jointly with a refit of each direction
  alone, seeded by the quasi-steady criticals of every probe;
* :meth:`RunModal.govern` decides, per quasi-steady critical, which reading the margin
  check uses: the sweep-free one (the peak of the fitted model's steady response and its
  API 684 half-power AF) when the fit of its band is good, the apparent (sweep) reading
  otherwise, the more conservative of the two with the largest candidate AF when one
  more mode fits significantly better but cannot be resolved (an *unresolved split*);
* :meth:`RunModal.bearings_json` reports per bearing with an X/Y pair the criticals of
  the model's major-axis response, the direction and whirl of each mode there and a split
  critical as two modes with their directions;
* :meth:`RunModal.model_json` is the shared model (modes, uncertainties, shape across
  the probes and the shape-based mode hint, bands, run-direction agreement).

Sources: F. M. Lewis, "Vibration during acceleration through a critical speed", Trans.
ASME 54 (1932) (the sweep shift the fit removes); API RP 684, 2nd ed., 2005 (half-power
AF; the major-axis response for margins, from memory).
"""

from __future__ import annotations

import math
import warnings
from contextlib import nullcontext
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from rundash.analysis.criticals import CRITICALLY_DAMPED_AF
from rundash.analysis.modes import mode_hint
from rundash.analysis.transient import METHOD, RunModes, fit_speed_range, identify_modes
from rundash.analysis.whirl import (
    directions_differ, major_axis_readings, mode_direction, orbit, pair_shape_hint,
)
from rundash.conventions import lag_deg_from_phasor
from rundash.errors import AnalysisError
from rundash.units import vector_amplitude_factor

#: Bootstrap replicates of the run's modal model.
N_BOOT = 20
#: A sweep-free reading belongs to a quasi-steady critical within this fraction of speed.
#: What the sweep-free +/- mean when the fit of the band is not good. The bootstrap
#: spreads the residuals as if they were independent from block to block; a model that
#: leaves a smooth, systematic misfit (several times the noise) errs by more than that
#: spread says (common practice, no source).
UNCERTAINTY_NOTE = ("the ± are statistical only: the model leaves a systematic misfit in "
                    "this band, so the reading's real error is larger than they say")

MATCH_FRACTION = 0.08

SOURCES = ("F. M. Lewis, Trans. ASME 54 (1932): sweep shift of the apparent critical",
           "API RP 684, 2nd ed., 2005: half-power amplification factor (edition from memory)")
SWEEP_FREE_METHOD = "half-power of the fitted model's steady response (API 684), sweep-free"


def json_number(x):
    """A finite float for the JSON, or None (NaN, inf, None and non-numbers)."""
    if x is None:
        return None
    try:
        x = float(x)
    except (TypeError, ValueError):
        return None
    return x if math.isfinite(x) else None


@dataclass
class RunModal:
    """The run's modal model and what the findings need of it."""

    modes: RunModes | None
    probe_names: list[str]
    afac: list[float]
    basis: str
    note: str = ""
    n_min: float = 0.0
    n_mc: float = 0.0
    angles: dict[str, float] = field(default_factory=dict)
    pairs: list[tuple[str, str, str]] = field(default_factory=list)  # bearing, X, Y
    axis_of: dict[str, tuple[str, str]] = field(default_factory=dict)  # probe -> (bearing, axis)
    k_int: list[int] = field(default_factory=list)  # integrations to displacement per probe

    def index(self, name: str) -> int | None:
        return self.probe_names.index(name) if name in self.probe_names else None

    @property
    def fitted(self) -> bool:
        return self.modes is not None and self.modes.fit is not None and bool(self.modes.clusters)

    # ------------------------------------------------------------------ one critical
    def govern(self, crit, probe: str):
        """(critical for the margin check, JSON fields) of one quasi-steady critical."""
        apparent = dict(speed_rpm=json_number(crit.speed_rpm), af=json_number(crit.af_governing),
                        af_method=crit.af_method,
                        damping_ratio=json_number(crit.fit.zeta) if crit.fit is not None else None,
                        natural_frequency_rpm=json_number(crit.fit.fn_rpm) if crit.fit is not None
                        else None)
        out = dict(apparent=apparent, sweep_free=None, governing="apparent",
                   governing_reason="", sources=list(SOURCES))
        j = self.index(probe)
        if not self.fitted or j is None:
            out["governing_reason"] = ("apparent (sweep) reading: " + (
                self.note if not self.fitted else f"{probe} is not in the run's modal model "
                f"({self.basis})"))
            return crit, out
        rm = self.modes
        cands = [r for r in rm.readings(j)
                 if abs(r.speed_rpm - crit.speed_rpm) <= MATCH_FRACTION * crit.speed_rpm]
        cl = rm.cluster_of(crit.speed_rpm)
        if cl is not None:
            inside = [r for r in cands if cl.band_rpm[0] <= r.speed_rpm <= cl.band_rpm[1]]
            cands = inside or cands
        if not cands:
            out["governing_reason"] = ("apparent (sweep) reading: the modal model has no peak "
                                       f"at {probe} within {100 * MATCH_FRACTION:.0f} % of it")
            return crit, out
        r = min(cands, key=lambda r: abs(r.speed_rpm - crit.speed_rpm))
        cl = rm.cluster_of(r.speed_rpm) or cl
        m = rm.modes[r.mode]
        af, af_how = r.af, "half-power of the fitted steady response at the probe"
        if af is None and m.af is not None:
            af, af_how = m.af, "closed-form half-power AF of the fitted mode alone"
        if af is None and m.zeta > 0.3:
            af, af_how = 0.5 / m.zeta, "1/(2 zeta) of the fitted mode (heavily damped: no half-power points)"
        sf = dict(speed_rpm=json_number(r.speed_rpm), speed_std_rpm=json_number(r.speed_std_rpm),
                  af=json_number(af), af_std=json_number(r.af_std) if af is r.af else json_number(m.af_std),
                  af_basis=af_how, af_note=r.af_note, n1_rpm=json_number(r.n1_rpm), n2_rpm=json_number(r.n2_rpm),
                  mode=int(r.mode), natural_frequency_rpm=json_number(m.fn_rpm),
                  natural_frequency_std_rpm=json_number(m.fn_std_rpm), damping_ratio=json_number(m.zeta),
                  damping_ratio_std=json_number(m.zeta_std),
                  band_rpm=[json_number(cl.band_rpm[0]), json_number(cl.band_rpm[1])] if cl else None,
                  fit_good=bool(cl.good) if cl else False,
                  unresolved_split=bool(cl.unresolved_split) if cl else False,
                  conservative_af=json_number(cl.conservative_af) if cl else None,
                  notes=list(cl.notes) if cl else [])
        if cl is None or not cl.good:
            sf["uncertainty_note"] = UNCERTAINTY_NOTE
        out["sweep_free"] = sf
        shift = 100.0 * (crit.speed_rpm / r.speed_rpm - 1.0)
        if cl is None or not cl.good:
            bad = [n for n in (cl.notes if cl else ("no band of the model holds it",))
                   if not n.startswith("unresolved split") and " fitted alone: " not in n]
            out["governing_reason"] = ("apparent (sweep) reading: the modal fit of this band is "
                                       "not good enough to govern (" + "; ".join(bad) + ")")
            return crit, out
        if cl.unresolved_split:
            # two modes likely, not separable: the speed nearer the operating range and
            # the largest AF of the candidates
            def gap(x):
                return self.n_min - x if x < self.n_min else (x - self.n_mc if x > self.n_mc else 0.0)
            speed = min((crit.speed_rpm, r.speed_rpm), key=gap)
            afs = [a for a in (cl.conservative_af, af, crit.af_governing) if a is not None]
            gaf = max(afs) if afs else None
            out["governing"] = "conservative"
            out["governing_reason"] = (
                f"unresolved split: one more mode fits significantly better but cannot be "
                f"resolved, so the margin uses the speed nearer the operating range "
                f"({speed:.0f} rpm of apparent {crit.speed_rpm:.0f} / sweep-free "
                f"{r.speed_rpm:.0f}) and the largest AF of the candidates"
                + (f" ({gaf:.2f})" if gaf is not None else ""))
            how = "largest AF of an unresolved split (conservative)"
        else:
            speed, gaf = r.speed_rpm, af
            std = f" +- {r.speed_std_rpm:.0f}" if r.speed_std_rpm is not None else ""
            out["governing"] = "sweep-free"
            out["governing_reason"] = (
                f"sweep-free reading governs: the modal fit of {cl.band_rpm[0]:.0f}-"
                f"{cl.band_rpm[1]:.0f} rpm explains the data to the noise, so its steady "
                f"peak {r.speed_rpm:.0f}{std} rpm replaces the apparent {crit.speed_rpm:.0f} "
                f"rpm ({shift:+.1f} %, the sweep shift of Lewis 1932)"
                + (f"; run directions {cl.agreement} when fitted alone" if cl.agreement else ""))
            how = SWEEP_FREE_METHOD if af is r.af else af_how
        if gaf is None:
            gaf, how = crit.af_governing, crit.af_method
        fit = crit.fit
        if fit is not None and out["governing"] == "sweep-free":
            fit = replace(fit, fn_rpm=m.fn_rpm, zeta=m.zeta)
        gov = replace(crit, speed_rpm=float(speed), af_governing=gaf, af_method=how,
                      critically_damped=gaf is not None and gaf < CRITICALLY_DAMPED_AF, fit=fit)
        return gov, out

    # ------------------------------------------------------------------ bearings
    def bearings_json(self, apparent: dict[tuple[str, str], tuple]) -> list[dict[str, Any]]:
        """Per bearing with an X/Y pair in the model: major-axis criticals, mode
        directions, splits; ``apparent`` maps (probe, direction) to its criticals."""
        if not self.fitted:
            return []
        rm = self.modes
        fit = rm.fit
        out = []
        for bearing, px, py in self.pairs:
            jx, jy = self.index(px), self.index(py)
            ax, ay = self.angles[px], self.angles[py]
            for cl in rm.clusters:
                try:
                    reads = major_axis_readings(fit, jx, jy, angle_x_deg=ax, angle_y_deg=ay,
                                                band_rpm=cl.band_rpm)
                except AnalysisError:
                    continue
                fac = self.afac[jx]
                modes = []
                for k in cl.mode_index:
                    mm = fit.modes[k]
                    d = mode_direction(mm.participation[jx], mm.participation[jy],
                                       angle_x_deg=ax, angle_y_deg=ay)
                    modes.append(dict(mode=k, natural_frequency_rpm=json_number(mm.fn_rpm),
                                      natural_frequency_std_rpm=json_number(mm.fn_std_rpm),
                                      peak_speed_rpm=json_number(mm.peak_speed_rpm),
                                      damping_ratio=json_number(mm.zeta), af=json_number(mm.af),
                                      af_std=json_number(mm.af_std),
                                      direction_deg=json_number(d.direction_deg), whirl=d.whirl,
                                      ellipticity=json_number(d.ellipticity),
                                      major_amplitude=json_number(fac * d.amplitude)))
                split, note = "", ""
                if len(modes) >= 2:
                    split = "two modes" if len(modes) == 2 else f"{len(modes)} modes"
                    dirs = ", ".join(f"{m['natural_frequency_rpm']:.0f} rpm along "
                                     f"{m['direction_deg']:.0f} deg ({m['whirl']})" for m in modes)
                    differ = any(directions_differ(a["direction_deg"], b["direction_deg"])
                                 for a, b in zip(modes[:-1], modes[1:]))
                    note = (f"split critical: {split} in {cl.band_rpm[0]:.0f}-{cl.band_rpm[1]:.0f}"
                            f" rpm, {dirs}" + ("; along different directions (anisotropic "
                                               "supports)" if differ else ""))
                elif cl.unresolved_split:
                    split = "unresolved split"
                    note = ("unresolved split: a second mode fits significantly better but cannot "
                            "be resolved; the conservative AF "
                            + (f"{cl.conservative_af:.2f}" if cl.conservative_af else "n/a")
                            + " is the largest of the candidate modes")
                evidence = []
                for p in (px, py):
                    j = self.index(p)
                    sf = ", ".join(f"{r.speed_rpm:.0f}" for r in rm.readings(j)
                                   if cl.band_rpm[0] <= r.speed_rpm <= cl.band_rpm[1])
                    evidence.append(f"{p}: sweep-free peaks at {sf or 'none'} rpm")
                    for (name, d), (crits, *_r) in apparent.items():
                        if name == p:
                            ap = ", ".join(f"{c.speed_rpm:.0f}" for c in crits
                                           if cl.band_rpm[0] <= c.speed_rpm <= cl.band_rpm[1])
                            if ap:
                                evidence.append(f"{p} {d}: apparent peaks at {ap} rpm")
                grid = np.linspace(cl.band_rpm[0], cl.band_rpm[1], 241)
                H = fit.steady(grid)
                major = orbit(H[jx], H[jy], angle_x_deg=ax, angle_y_deg=ay).major
                out.append(dict(
                    bearing=bearing, probes=[px, py], band_rpm=[json_number(b) for b in cl.band_rpm],
                    major_curve=dict(speed_rpm=[round(float(x), 2) for x in grid],
                                     major_amplitude=[float(f"{fac * m:.5g}") for m in major]),
                    criticals=[dict(speed_rpm=json_number(r.speed_rpm), af=json_number(r.af), af_note=r.af_note,
                                    major_amplitude=json_number(fac * r.major), mode=int(r.mode),
                                    speed_std_rpm=json_number(fit.modes[r.mode].peak_speed_std_rpm)
                                    if r.mode >= 0 else None) for r in reads],
                    modes=modes, split=split, note=note, fit_good=bool(cl.good),
                    conservative_af=json_number(cl.conservative_af) if cl.unresolved_split else None,
                    basis="major axis of the fitted model's steady 1X orbit (API 684 reads the "
                          "major-axis response for margins, from memory)",
                    evidence=evidence))
        return out

    # ------------------------------------------------------------------ the model
    def _hint(self, k: int) -> dict[str, Any] | None:
        m = self.modes.fit.modes[k]
        R = m.participation
        if len(self.pairs) >= 2:
            (_, ax, ay), (_, bx, by) = self.pairs[0], self.pairs[1]
            ia, ja, ib, jb = (self.index(p) for p in (ax, ay, bx, by))
            h = pair_shape_hint(R[ia], R[ja], R[ib], R[jb],
                                angles_a_deg=(self.angles[ax], self.angles[ay]),
                                angles_b_deg=(self.angles[bx], self.angles[by]))
            vs = f"bearings {self.pairs[0][0]} and {self.pairs[1][0]}"
        else:
            pair = None
            for a in self.probe_names:
                for b in self.probe_names:
                    ba, bb = self.axis_of.get(a), self.axis_of.get(b)
                    if ba and bb and ba[0] != bb[0] and ba[1] == bb[1] and a < b:
                        pair = pair or (a, b)
            if pair is None:
                return None
            ia, ib = self.index(pair[0]), self.index(pair[1])
            h = mode_hint(float(lag_deg_from_phasor(R[ia])), float(lag_deg_from_phasor(R[ib])),
                          angle_a_deg=self.angles.get(pair[0], 0.0),
                          angle_b_deg=self.angles.get(pair[1], 0.0),
                          amplitude_a=abs(R[ia]), amplitude_b=abs(R[ib]))
            vs = f"{pair[0]} vs {pair[1]}"
        return dict(shape=h.shape, phase_difference_deg=json_number(h.phase_difference_deg),
                    between=vs, evidence=list(h.evidence),
                    note="a hint from the fitted mode shape, not a verdict")

    def curves(self, n: int = 241) -> list[dict[str, Any]]:
        """The fitted model's steady 1X response per probe over the fitted band, in the
        probe's stored units and phase lag (what the Bode and polar plots draw over the
        slow-roll compensated data)."""
        fit = self.modes.fit
        grid = np.linspace(fit.band_rpm[0], fit.band_rpm[1], n)
        H = fit.steady(grid)
        out = []
        for j, p in enumerate(self.probe_names):
            h = H[j] * (1j * 2.0 * math.pi * grid / 60.0) ** self.k_int[j] if self.k_int else H[j]
            out.append(dict(probe=p, speed_rpm=[round(float(x), 2) for x in grid],
                            amplitude=[float(f"{self.afac[j] * abs(x):.5g}") for x in h],
                            phase_lag_deg=[round(float(x), 2) for x in lag_deg_from_phasor(h)]))
        return out

    def model_json(self) -> dict[str, Any]:
        base = dict(method=METHOD, basis=self.basis, fitted_probes=list(self.probe_names),
                    sources=list(SOURCES))
        if not self.fitted:
            return dict(base, status="not fitted", note=self.note, modes=[], clusters=[],
                        directions=[])
        rm = self.modes
        fit = rm.fit
        modes = []
        for k, m in enumerate(fit.modes):
            shape = [dict(probe=p, amplitude=json_number(self.afac[j] * abs(m.participation[j])),
                          lag_deg=json_number(lag_deg_from_phasor(m.participation[j])))
                     for j, p in enumerate(self.probe_names)]
            modes.append(dict(
                index=k, natural_frequency_rpm=json_number(m.fn_rpm),
                natural_frequency_std_rpm=json_number(m.fn_std_rpm), damping_ratio=json_number(m.zeta),
                damping_ratio_std=json_number(m.zeta_std), peak_speed_rpm=json_number(m.peak_speed_rpm),
                peak_speed_std_rpm=json_number(m.peak_speed_std_rpm), af=json_number(m.af),
                af_std=json_number(m.af_std),
                critically_damped=m.af is None or m.af < CRITICALLY_DAMPED_AF,
                shape=shape, shape_hint=self._hint(k)))
        per_probe = [dict(probe=self.probe_names[r.probe], mode=int(r.mode),
                          speed_rpm=json_number(r.speed_rpm), speed_std_rpm=json_number(r.speed_std_rpm),
                          af=json_number(r.af), af_std=json_number(r.af_std), af_note=r.af_note)
                     for r in fit.readings]
        return dict(
            base, status="fitted", note=self.note, band_rpm=[json_number(b) for b in fit.band_rpm],
            curves=self.curves(),
            misfit_ratio=json_number(fit.misfit_ratio), relative_error=json_number(fit.relative_error),
            n_blocks=int(fit.n_blocks), n_boot=int(fit.n_boot), modes=modes,
            probe_readings=per_probe,
            clusters=[dict(band_rpm=[json_number(b) for b in c.band_rpm], modes=list(c.mode_index),
                           candidates_rpm=[json_number(x) for x in c.candidates_rpm], good=bool(c.good),
                           unresolved_split=bool(c.unresolved_split),
                           conservative_af=json_number(c.conservative_af), agreement=c.agreement,
                           notes=list(c.notes), tried=list(c.tried)) for c in rm.clusters],
            directions=[dict(direction=d.direction, natural_frequencies_rpm=[json_number(x) for x in d.fn_rpm],
                             damping_ratios=[json_number(x) for x in d.zeta], n_blocks=int(d.n_blocks))
                        for d in rm.directions])


def identify_run(*, track, compensated, probes, k1, directions, per_probe, spec_by_name,
                 machine, revs_per_block: int = 1, seismic_ref=(), n_boot: int = N_BOOT,
                 stage=None, conjugate_part: bool = True) -> RunModal:
    """Fit the run's modal model (see the module docstring); never raises on a fit that
    fails: the result then says why (``note``) and the apparent readings govern."""
    stage = stage or (lambda name: nullcontext())
    prox = [i for i, ch in enumerate(probes) if ch.kind == "proximity"]
    seis = [i for i, ch in enumerate(probes) if ch.kind in ("velocity", "acceleration")]
    use = prox or seis
    basis = ("proximity probes, slow-roll compensated 1X" if prox else
             "seismic probes, 1X integrated to its displacement equivalent")
    names = [probes[i].probe_name for i in use]
    rm = RunModal(None, names, [], basis, n_min=float(machine.min_operating_speed_rpm),
                  n_mc=float(machine.max_continuous_speed_rpm))
    rm.afac = [vector_amplitude_factor(probes[i].kind) for i in use]
    for n in names:
        sp = spec_by_name.get(n)
        rm.angles[n] = float(sp.angle_deg) if sp is not None else 0.0
        if sp is not None and sp.bearing and sp.axis in ("X", "Y"):
            rm.axis_of[n] = (sp.bearing, sp.axis)
    by_b: dict[str, dict[str, str]] = {}
    for n, (b, a) in rm.axis_of.items():
        by_b.setdefault(b, {}).setdefault(a, n)
    rm.pairs = [(b, d["X"], d["Y"]) for b, d in sorted(by_b.items()) if "X" in d and "Y" in d]
    if k1 is None or not use:
        rm.note = "no 1X vectors to fit" if k1 is None else "no probe with 1X vectors to fit"
        return rm
    if not directions:
        rm.note = "the run has no run-up or coast-down stretch long enough to fit"
        return rm
    cands = []
    for (name, d), (crits, *_r) in per_probe.items():
        if name in names:
            for c in crits:
                f = c.fit.fn_rpm if c.fit is not None else c.speed_rpm
                cands.append((f, 0.5 / c.af_governing if c.af_governing else None))
    if not cands:
        rm.note = "no quasi-steady critical to start the fit from"
        return rm
    with stage("modal fits"):
        s = np.asarray(track.speed_rpm, dtype=np.float64)
        # only the blocks a band of the fit can take, one probe at a time, as stored
        # (complex64: each fit takes its own blocks' vectors as complex128)
        lo, hi = fit_speed_range(cands)
        blocks = np.flatnonzero((s >= lo) & (s <= hi))
        V = None
        for r, i in enumerate(use):
            row = np.asarray(compensated[i, k1])
            if V is None:
                V = np.empty((len(use), blocks.size),
                             np.complex64 if prox and row.dtype == np.complex64 else np.complex128)
            V[r] = row[blocks]
            del row
        if not prox:
            rm.k_int = [1 if probes[i].kind == "velocity" else 2 for i in use]
            k_int = np.array(rm.k_int)[:, None]
            V = V / (1j * 2.0 * math.pi * s[None, blocks] / 60.0) ** k_int
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                rm.modes = identify_modes(track.time_s, s, V, candidates=cands,
                                          revs_per_block=revs_per_block,
                                          rev_index=track.rev_index, masks=directions,
                                          n_boot=n_boot, conjugate_part=conjugate_part,
                                          blocks=blocks)
        except (AnalysisError, np.linalg.LinAlgError, ValueError) as exc:
            rm.note = f"the modal fit failed ({exc})"
            return rm
    if not rm.fitted:
        rm.note = "no mode could be fitted around the quasi-steady criticals"
    return rm
