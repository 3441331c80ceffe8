"""Findings of a run: analysis results gathered into the findings JSON and table rows.

Pipeline-level glue (no I/O): for every probe and run direction it finds the critical
speeds in the slow-roll-compensated 1X vectors, adds mode-shape hints from the two
bearings, judges each critical's separation margin against the machine's guidance
profile, checks levels against the limits, combines the X/Y probes of each bearing and
compares run-up with coast-down. The JSON (schema ``rundash.findings/1``, documented in
the README) is what ``rundash findings --json`` prints and the dashboard reads.
"""

from __future__ import annotations

import warnings
from dataclasses import replace
from typing import Any, Sequence

import numpy as np

from rundash import CAUTION
from rundash.analysis import criticals as crit_mod
from rundash.analysis.limits import ZONE_SCOPE, check_holds, check_levels
from rundash.analysis.scope import find_holds
from rundash.analysis.zones import ZoneSettings
from rundash.analysis.modes import mode_hint
from rundash.analysis.vectors import mean_vector_near
from rundash.analysis.verdicts import judge, summarize
from rundash.conventions import lag_deg_from_phasor
from rundash.dsp.directions import MIN_BLOCKS, direction_masks
from rundash.errors import AnalysisError, SweepRateWarning
from rundash.ingest.profile_file import load_profile
from rundash.model import ChannelInfo, MachineDescription, RunInfo
from rundash.units import (
    LEVEL_CONVENTION, STORAGE_UNIT, VECTOR_AMPLITUDE_CONVENTION, amplitude_label,
    vector_amplitude_factor,
)
from rundash.workflows.modal import identify_run, json_number

SCHEMA = "rundash.findings/1"
# criticals of seismic probes are read on their displacement-equivalent 1X
_MEASURE = {"proximity": "displacement", "velocity": "velocity", "acceleration": "acceleration"}


def _taken(a: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """``a[mask]``, as a read-only view of ``a`` when the mask is one stretch of blocks
    (a direction of a plain run-up or coast-down: no copy of the run's speeds and times)."""
    idx = np.flatnonzero(mask)
    if idx.size and idx[-1] - idx[0] + 1 == idx.size:
        view = np.asarray(a)[idx[0]:idx[-1] + 1]
        view.flags.writeable = False
        return view
    return np.asarray(a)[mask]


def build_findings(*, desc: MachineDescription, run: RunInfo, probes: Sequence[ChannelInfo],
                   track, compensated: np.ndarray, segments, slow_roll_rpm,
                   processing_notes: Sequence[str] = (),
                   angle_bound_rad: np.ndarray | None = None,
                   slow_roll_basis: str = "", revs_per_block: int = 1,
                   stage=None, conjugate_part: bool = True,
                   velocity_band=None) -> dict[str, Any]:
    """Findings JSON of one processed run (see the module docstring).

    The run's modal model (:func:`rundash.workflows.modal.identify_run`) is fitted after
    the quasi-steady criticals; each critical's margin is judged on its governing
    reading (sweep-free when the fit is good). ``stage(name)`` is a context manager that
    times the modal fits (the pipeline's stage timer); ``conjugate_part`` False for
    vectors of a narrow-band tracker (Vold–Kalman), which picks up no conjugate part.

    ``processing_notes`` (tach repairs, a missing slow-roll window, ...) lead the
    findings' warnings: a reviewer must see what the vectors rest on.

    ``velocity_band`` (:class:`rundash.dsp.overall.OverallBand`) is the band of the
    velocity probes' overall level (``track.direct_rms`` of those probes, band-limited by
    the pipeline); it is stated in the findings and on each velocity overall check.
    """
    m = desc.machine
    profile = load_profile(m.profile)
    notes: list[str] = list(processing_notes)
    k1 = int(np.flatnonzero(np.isclose(track.orders, 1.0))[0]) if np.any(
        np.isclose(track.orders, 1.0)) else None
    spec_by_name = {p.name: p for p in desc.probes}
    directions = direction_masks(track.time_s, segments, min_blocks=MIN_BLOCKS)
    if k1 is None:
        notes.append("1X was not tracked: no critical speeds can be found")
    if not directions:
        notes.append("the run has no run-up or coast-down stretch long enough to judge")

    # seismic probes at a bearing that has proximity probes: their criticals are shown as
    # measured, and that bearing's margins are judged from the proximity probes
    processed = {c.probe_name for c in probes}
    prox_at = {}
    for p in desc.probes:
        if p.kind == "proximity" and p.bearing and p.name in processed:
            prox_at.setdefault(p.bearing, []).append(p.name)
    seismic_ref: dict[str, list[str]] = {}  # seismic probe -> the bearing's proximity probes
    per_probe: dict[tuple[str, str], tuple] = {}  # (probe, direction) -> (crits, speed, vec)
    sweep_notes: dict[tuple[str, str], list[int]] = {}  # (probe, direction) -> note indices
    # speeds and times of each direction are shared by every probe; each probe's vectors
    # are read again where they are needed (held_1x: the pipeline gives them from a
    # temporary file) and taken to complex128 there (_c128): what is held stays small on
    # a long run
    by_dir = {d: (_taken(track.speed_rpm, sel), _taken(track.time_s, sel))
              for d, sel in directions.items()}

    def held_1x(i: int, d: str) -> np.ndarray:
        """Probe i's compensated 1X in direction d, complex128."""
        return _c128(compensated[i, k1, directions[d]])
    if k1 is not None:
        for i, ch in enumerate(probes):
            if ch.kind not in VECTOR_AMPLITUDE_CONVENTION:
                continue
            afac = vector_amplitude_factor(ch.kind)
            for d, sel in directions.items():
                s, t = by_dir[d]
                v = held_1x(i, d)
                floor = None
                if angle_bound_rad is not None and ch.kind == "proximity":
                    # the reference angle error rotates the measured vector, not the
                    # subtracted slow-roll vector
                    floor = np.abs(track.vectors[i, k1, sel]).astype(np.float64) * \
                        angle_bound_rad[sel]
                sp = spec_by_name.get(ch.probe_name)
                measure = _MEASURE.get(ch.kind, "displacement")
                if measure != "displacement" and sp is not None and prox_at.get(sp.bearing):
                    seismic_ref[ch.probe_name] = prox_at[sp.bearing]
                with warnings.catch_warnings(record=True) as caught:
                    warnings.simplefilter("always")
                    if ch.probe_name in seismic_ref:
                        # as measured (its own peak), with the displacement-equivalent
                        # speed beside it
                        crits = crit_mod.find_criticals(s, v, time_s=t, amplitude_factor=afac,
                                                        direction=d)
                        crits = _with_displacement_equivalent(crits, s, v, afac, d, measure)
                    else:
                        crits = crit_mod.find_criticals(
                            s, v, time_s=t, amplitude_factor=afac, direction=d,
                            amplitude_floor=floor, measure=measure)
                for w in caught:
                    if issubclass(w.category, SweepRateWarning):
                        sweep_notes.setdefault((ch.probe_name, d), []).append(len(notes))
                    notes.append(f"{ch.probe_name} {d}: {w.message}")
                per_probe[(ch.probe_name, d)] = (crits, s, None, t, afac, i)
                del v

    # mode-shape hints: the same-axis probe at another bearing, at the same speed
    hints: dict[tuple[str, str], list[str | None]] = {}
    for (name, d), (crits, s, _v, t, afac, i) in per_probe.items():
        sp = spec_by_name.get(name)
        partner = None
        if sp is not None and sp.bearing:
            partner = next((p for p in desc.probes if p.name != name and p.bearing
                            and p.bearing != sp.bearing and p.axis == sp.axis
                            and p.kind == sp.kind and (p.name, d) in per_probe), None)
        out = []
        v = held_1x(i, d) if partner is not None and crits else None
        v2 = held_1x(per_probe[(partner.name, d)][5], d) if v is not None else None
        for c in crits:
            if partner is None:
                out.append(None)
                continue
            s2 = per_probe[(partner.name, d)][1]
            a, _ = mean_vector_near(s, v, c.speed_rpm, nearest_within_pct=2.0)
            b, _ = mean_vector_near(s2, v2, c.speed_rpm, nearest_within_pct=2.0)
            if a is None or b is None:
                out.append(None)
                continue
            h = mode_hint(float(lag_deg_from_phasor(a)), float(lag_deg_from_phasor(b)),
                          angle_a_deg=sp.angle_deg, angle_b_deg=partner.angle_deg,
                          amplitude_a=abs(a), amplitude_b=abs(b))
            out.append(f"{h.shape} (vs {partner.name}, "
                       + (f"{h.phase_difference_deg:.0f} deg apart" if h.phase_difference_deg
                          is not None else "phase difference unclear") + "; a hint)")
        hints[(name, d)] = out
        del v, v2

    modal = identify_run(track=track, compensated=compensated, probes=probes, k1=k1,
                         directions=directions, per_probe=per_probe, spec_by_name=spec_by_name,
                         machine=m, revs_per_block=revs_per_block, seismic_ref=seismic_ref,
                         stage=stage, conjugate_part=conjugate_part)
    if not modal.fitted and per_probe:
        notes.append(f"sweep-free readings: none ({modal.note}); the apparent readings govern")

    margins = []
    level_checks = []
    crit_json: list[dict[str, Any]] = []
    limits_json: list[dict[str, Any]] = []
    # what the run records decides which rules are in scope: a field run's stretches by
    # their direction (holds as 'steady'), a marked shop or trip test as such
    test_kind = getattr(run, "test_kind", "field") or "field"
    zones = ZoneSettings.for_machine(m.kind, **vars(desc.zones))
    holds = _holds(track, profile)
    hold_kind = "steady" if test_kind == "field" else test_kind
    for (name, d), (crits, s, _v, t, afac, i) in per_probe.items():
        ch = probes[i]
        sp = spec_by_name.get(name)
        units = amplitude_label(ch.kind)
        governed = [modal.govern(c, name) for c in crits]
        for c, (g, info) in zip(crits, governed):
            _mark_sweep_note(notes, sweep_notes.get((name, d), ()), c, g, info)
        mv = judge([g for g, _ in governed], min_operating_speed_rpm=m.min_operating_speed_rpm,
                   max_continuous_speed_rpm=m.max_continuous_speed_rpm, profile=profile,
                   rated_speed_rpm=m.rated_speed_rpm, probe=name, amplitude_units=units,
                   mode_hints=hints[(name, d)],
                   run_kind=d if test_kind == "field" else test_kind,
                   data_range_rpm=(float(np.nanmin(s)), float(np.nanmax(s))))
        refs = seismic_ref.get(name)
        if refs:
            why = (f"not counted in the run verdict: bearing {sp.bearing}'s margins are judged "
                   f"from its proximity probes ({', '.join(refs)}); a {ch.kind} reading carries "
                   f"an extra factor of speed, which moves its peak above the displacement peak")
            mv = tuple(replace(x, reason=f"{why}. {x.reason}") for x in mv)
        else:
            margins.extend(mv)
        for verdict, (_, info) in zip(mv, governed):
            j = verdict.to_json_dict()
            j.update(info)
            j["counts_for_run_verdict"] = not refs
            c = verdict.critical
            hp = c.half_power
            j.update(bearing=sp.bearing if sp else "", axis=sp.axis if sp else "none",
                     band_rpm=[json_number(c.band_rpm[0]), json_number(c.band_rpm[1])],
                     n1_rpm=json_number(hp.n1_rpm) if hp is not None else None,
                     n2_rpm=json_number(hp.n2_rpm) if hp is not None else None)
            crit_json.append(j)
        if ch.kind in ("proximity", "velocity"):
            direct = track.direct_pp[i] if ch.kind == "proximity" else track.direct_rms[i]
            sel = directions[d]
            checks = check_levels(s, vector=held_1x(i, d), direct=np.asarray(direct[sel], np.float64),
                                  criticals=crits,
                                  kind=ch.kind, amplitude_factor=afac,
                                  max_continuous_speed_rpm=m.max_continuous_speed_rpm,
                                  profile=profile,
                                  run_kind=d if test_kind == "field" else test_kind,
                                  site_levels=[x for x in desc.levels if x.probe == name],
                                  zones=zones)
            level_checks.extend(checks)
            _limit_rows(limits_json, checks, name, d, _band_of(ch.kind, velocity_band))

    # steady holds (the whole run, not one direction): the rules whose scope is a hold
    if k1 is not None and holds:
        for i, ch in enumerate(probes):
            if ch.kind not in ("proximity", "velocity"):
                continue
            direct = track.direct_pp[i] if ch.kind == "proximity" else track.direct_rms[i]
            checks = check_holds(track.time_s, track.speed_rpm, holds,
                                 vector=np.asarray(compensated[i, k1], np.complex128),
                                 direct=np.asarray(direct, np.float64), kind=ch.kind,
                                 amplitude_factor=vector_amplitude_factor(ch.kind),
                                 min_operating_speed_rpm=m.min_operating_speed_rpm,
                                 max_continuous_speed_rpm=m.max_continuous_speed_rpm,
                                 profile=profile, run_kind=hold_kind,
                                 site_levels=[x for x in desc.levels
                                              if x.probe == ch.probe_name], zones=zones)
            level_checks.extend(checks)
            _limit_rows(limits_json, checks, ch.probe_name, "steady",
                        _band_of(ch.kind, velocity_band))

    bearings = []
    by_bearing: dict[tuple[str, str], dict[str, Any]] = {}
    for (name, d), (crits, *_r) in per_probe.items():
        sp = spec_by_name.get(name)
        if sp is None or not sp.bearing or sp.axis not in ("X", "Y"):
            continue
        by_bearing.setdefault((sp.bearing, d), {})[sp.axis] = (name, crits)
    for (bearing, d), axes in sorted(by_bearing.items()):
        if "X" not in axes or "Y" not in axes:
            continue
        for pair in crit_mod.combine_bearing(axes["X"][1], axes["Y"][1]):
            ref = pair.a or pair.b
            bearings.append(dict(
                bearing=bearing, direction=d, probes=[axes["X"][0], axes["Y"][0]],
                speed_rpm=json_number(ref.speed_rpm) if ref else None,
                x_speed_rpm=json_number(pair.a.speed_rpm) if pair.a else None,
                y_speed_rpm=json_number(pair.b.speed_rpm) if pair.b else None,
                speed_difference_pct=json_number(pair.speed_difference_pct),
                af_difference=json_number(pair.af_difference), agreement=pair.agreement,
                note=pair.note))

    open_top = []
    for (name, d), (crits, s, _v, t, afac, i) in per_probe.items():
        r = crit_mod.rising_at_top(s, held_1x(i, d), amplitude_factor=afac)
        if r is not None:
            open_top.append(dict(probe=name, direction=d, from_rpm=json_number(r.from_rpm),
                                 to_rpm=json_number(r.to_rpm), rise_pct=json_number(r.rise_pct),
                                 lag_change_deg=json_number(r.lag_change_deg), note=r.note))
            notes.append(f"{name} {d}: {r.note}")

    direction_cmp = []
    names = sorted({n for n, _ in per_probe})
    for name in names:
        if (name, "run-up") in per_probe and (name, "coast-down") in per_probe:
            for pair in crit_mod.compare_directions(per_probe[(name, "run-up")][0],
                                                    per_probe[(name, "coast-down")][0]):
                direction_cmp.append(dict(
                    probe=name,
                    run_up_speed_rpm=json_number(pair.a.speed_rpm) if pair.a else None,
                    coast_down_speed_rpm=json_number(pair.b.speed_rpm) if pair.b else None,
                    speed_difference_pct=json_number(pair.speed_difference_pct),
                    af_difference=json_number(pair.af_difference), agreement=pair.agreement,
                    note=pair.note))

    summary = summarize(margins, profile=profile,
                        min_operating_speed_rpm=m.min_operating_speed_rpm,
                        max_continuous_speed_rpm=m.max_continuous_speed_rpm,
                        level_checks=level_checks,
                        top_speed_rpm=float(np.nanmax(track.speed_rpm)))
    sj = summary.to_json_dict()
    return {
        "schema": SCHEMA,
        "run": dict(id=run.id, machine=run.machine_name, label=run.label, cycle=run.cycle,
                    kind=run.kind, test_kind=test_kind, started_at=run.started_at.isoformat() if run.started_at
                    else None, source=run.source_name),
        "machine": dict(rated_speed_rpm=m.rated_speed_rpm,
                        min_operating_speed_rpm=m.min_operating_speed_rpm,
                        max_continuous_speed_rpm=m.max_continuous_speed_rpm,
                        trip_speed_rpm=m.trip_speed_rpm, kind=m.kind),
        "profile": dict(sj["profile"], rules=_profile_rules(profile),
                        confidence_note=profile.confidence_note()),
        "zones": dict(settings=zones.describe(), part=zones.part, group=zones.group,
                      support=zones.support, pump_category=zones.pump_category,
                      pump_power=zones.pump_power, new_machine=zones.new_machine,
                      defaulted=list(zones.defaulted)),
        "site_levels": [dict(probe=x.probe, measure=x.measure, alert=x.alert, trip=x.trip,
                             source=x.source) for x in desc.levels],
        "processing": dict(slow_roll_rpm=list(slow_roll_rpm) if slow_roll_rpm else None,
                           holds=[dict(t_start_s=h.t_start_s, t_end_s=h.t_end_s,
                                       speed_rpm=h.speed_rpm, lo_rpm=h.lo_rpm,
                                       hi_rpm=h.hi_rpm) for h in holds],
                           slow_roll_basis=slow_roll_basis,
                           velocity_overall=velocity_band.to_json_dict()
                           if velocity_band is not None else None,
                           speed_range_rpm=[json_number(track.speed_rpm.min()),
                                            json_number(track.speed_rpm.max())]),
        "probes": [dict(name=ch.probe_name, kind=ch.kind, unit=STORAGE_UNIT.get(ch.kind, ""),
                        vector_convention=VECTOR_AMPLITUDE_CONVENTION.get(ch.kind, ""),
                        level_convention=LEVEL_CONVENTION.get(ch.kind, ""),
                        level_band=_band_of(ch.kind, velocity_band))
                   for ch in probes],
        "criticals": sorted(crit_json, key=lambda c: (c["direction"], c["speed_rpm"] or 0,
                                                      c["probe"])),
        "bearings": bearings,
        "bearing_modes": modal.bearings_json(per_probe),
        "modal_model": modal.model_json(),
        "directions": direction_cmp,
        "rising_at_top": open_top,
        "limits": limits_json,
        # how sure the profile is, said once and first
        "warnings": [n for n in sj["notes"] if n == profile.confidence_note()] + notes
        + [n for n in sj["notes"] if n != profile.confidence_note()],
        # nothing to judge (no run-up or coast-down long enough): never a silent pass
        "run_verdict": sj["overall"] if directions else "not judged",
        "caution": CAUTION,
    }


def _mark_sweep_note(notes, indices, crit, governed, info) -> None:
    """Say beside a fast-sweep warning whether the modal fit removed the bias."""
    key = f"critical at {crit.speed_rpm:.0f} rpm:"
    for k in indices:
        if key in notes[k]:
            if info["governing"] == "sweep-free":
                notes[k] += (f" Removed by the run's modal fit: the sweep-free reading governs "
                             f"({governed.speed_rpm:.0f} rpm, AF "
                             + (f"{governed.af_governing:.2f})." if governed.af_governing
                                is not None else "n/a)."))
            else:
                notes[k] += f" The modal fit could not remove it: {info['governing_reason']}."
            return


def _band_of(kind: str, band) -> str | None:
    """The band of a probe's overall level in words ('10-1000 Hz'), None when the level
    is as recorded (displacement p-p, acceleration rms, or no band given)."""
    return band.label() if kind == "velocity" and band is not None and band.applied else None


def _limit_rows(rows: list, checks, probe: str, direction: str,
                level_band: str | None = None) -> None:
    for lc in checks:
        lj = lc.to_json_dict()
        band = level_band if lj["quantity"] == "direct" else None
        rows.append(dict(
            probe=probe, direction=direction, measure=lj["quantity"], where=lj["where"],
            band_rpm=lj["band_rpm"], speed_rpm=json_number(lj["speed_rpm"]),
            value=json_number(lj["level"]), units=lj["units"],
            limit=json_number(lj["limit_value"]), limit_id=lj["limit"], zone=lj["zone"],
            verdict=lj["status"],
            basis=lj["note"] + (f"; overall {band}" if band else ""),
            source=lj["source"], scope=lj["scope"], level_band=band))


def _holds(track, profile):
    """Steady holds of the run's speed profile, at the widest tolerance and shortest time
    any hold-scoped rule (or the ISO zones) asks for; each rule then checks its own."""
    scopes = [ZONE_SCOPE] + [lim.scope for lim in profile.limits if lim.scope.needs_hold]
    t = np.asarray(track.time_s, np.float64)
    if t.size < 2:
        return ()
    return find_holds(t, np.asarray(track.speed_rpm, np.float64),
                      tolerance_pct=max(sc.hold_tolerance_pct for sc in scopes),
                      min_duration_s=min(sc.hold_min_s for sc in scopes))


def _c128(v) -> np.ndarray:
    """``v`` as complex128 (exact from complex64: every reading sees the same numbers)."""
    return np.asarray(v, dtype=np.complex128)


def _with_displacement_equivalent(crits, s, v, afac, direction, measure):
    """Add to each critical of a seismic probe, read as measured, the speed its
    displacement-equivalent 1X (integrated) puts it at."""
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            integ = crit_mod.find_criticals(s, v, amplitude_factor=afac, direction=direction,
                                            fit=False, measure=measure)
    except AnalysisError:
        return crits
    out = []
    for c in crits:
        near = [x for x in integ if abs(x.speed_rpm - c.speed_rpm) <= 0.05 * c.speed_rpm]
        if near:
            x = min(near, key=lambda x: abs(x.speed_rpm - c.speed_rpm))
            c = replace(c, evidence=c.evidence + (
                f"read as measured ({measure}); its displacement-equivalent 1X (integrated) "
                f"peaks at {x.speed_rpm:.0f} rpm",))
        out.append(c)
    return tuple(out)


def _profile_rules(profile) -> list[dict[str, Any]]:
    m = profile.margin
    rules = [dict(rule="separation margin", document=m.source.document,
                  edition=m.source.edition, clause=m.source.clause,
                  confidence=m.source.confidence, scope=m.scope.describe())]
    for lim in profile.limits:
        rules.append(dict(rule=lim.title, id=lim.id, document=lim.source.document,
                          edition=lim.source.edition, clause=lim.source.clause,
                          confidence=lim.source.confidence, scope=lim.scope.describe()))
    return rules


def finding_rows(findings: dict[str, Any]) -> list[dict[str, Any]]:
    """Rows of the finding table from a findings JSON."""
    rows = []
    for c in findings.get("criticals", []):
        rows.append(dict(
            probe_name=c["probe"], direction=c["direction"], speed_rpm=c["speed_rpm"],
            peak_amplitude=c.get("peak_amplitude"), amplitude_units=c.get("amplitude_units", ""),
            af_half_power=c.get("af_half_power"), af_phase=c.get("af_phase"),
            af_fit=c.get("af_fit"), damping_ratio_fit=c.get("damping_ratio_fit"),
            classification=c.get("classification", ""), confidence=c.get("confidence", ""),
            mode_hint=c.get("mode_hint"), separation_margin_pct=c.get("separation_margin_pct"),
            required_margin_pct=c.get("required_margin_pct"),
            margin_verdict=c.get("margin_verdict", ""), details=c))
    return rows
