"""Comparison of runs of one machine: pipeline-level glue (storage reads, no writes).

``compare_runs(db, run_ids)`` loads the stored 1X vectors of every run, estimates each
critical per probe and run direction with bootstrap uncertainties
(:func:`rundash.analysis.compare.estimate_curve`), compares every later run with the
first one named (the reference) and returns one JSON-ready dict, schema
``rundash.comparison/1`` (documented in the README), carrying the caution.

Vectors are the ones the findings use: slow-roll-compensated 1X for proximity probes,
uncompensated for seismic ones, cut into run-up and coast-down by the stored segments.
The standard error of each run's slow-roll vector enters the bootstrap as an offset
uncertainty, and the slow-roll vectors themselves are compared (runout, bow).

Run-to-run repeatability (:data:`REPEATABILITY`): where the runs compared include others
of one cycle (same machine, cycle, test kind, probe and run direction), a run's
uncertainties add the scatter between those runs beyond their own bootstrap noise; the
other run of the pair being judged is left out of that scatter.
"""

from __future__ import annotations

import math
from dataclasses import replace
from typing import Any, Sequence

import numpy as np

from rundash import CAUTION
from rundash.analysis import compare as cmp
from rundash.conventions import phasor_from_lag
from rundash.dsp.directions import MIN_BLOCKS, direction_masks
from rundash.errors import AnalysisError, InputError, NotFoundError
from rundash.workflows.findings import json_number
from rundash.storage import queries as q
from rundash.storage.engine import Database
from rundash.units import VECTOR_AMPLITUDE_CONVENTION, amplitude_label, vector_amplitude_factor

SCHEMA = "rundash.comparison/1"
RULE = ("a change is significant when |b - a| > k * sqrt(sigma_a^2 + sigma_b^2), k = {k:g} "
        "(about 95 % two-sided for Gaussian errors at k = 2; common practice, no source)")
METHOD = ("one-sigma uncertainties from a dependent wild bootstrap over revolutions "
          "({n_boot} replicates, blocks of {block} revolutions, plus the slow-roll "
          "vector's standard error as an offset); the whole critical-speed estimator is "
          "re-run on each replicate. The uncertainty covers the noise in the data, not "
          "biases the runs share (sweep-rate shift of the apparent peak): compare like "
          "with like.")


REPEATABILITY = (
    "run-to-run repeatability: where the runs compared include two or more of one cycle "
    "(same machine, cycle and test kind; same probe and run direction), each of their "
    "one-sigma uncertainties adds sigma_rep, the scatter between those runs beyond their "
    "own bootstrap noise: sigma_rep^2 = max(0, s^2 - mean(sigma_boot^2)), s the standard "
    "deviation of the runs' values (a one-way random-effects model solved by moments, as "
    "ISO 5725-2 separates repeatability from between-run scatter; from memory). The "
    "other run of the pair judged is left out of the scatter, so a difference is never "
    "its own uncertainty; with two values the scatter rests on one degree of freedom.")
#: criticals of two runs of one cycle are the same critical within this (as compare_curves)
_REP_MATCH_PCT = 10.0


def _cycle_key(run) -> tuple[str, str] | None:
    """Runs of one cycle: the same cycle (given) and the same test kind."""
    return (run.cycle, getattr(run, "test_kind", "field") or "field") if run.cycle else None


def _rep_sigma(values, sigmas, *, circular: bool = False) -> float | None:
    """sigma_rep of :data:`REPEATABILITY` from the runs' values and bootstrap sigmas
    (None with fewer than two values)."""
    pairs = [(v, sd) for v, sd in zip(values, sigmas) if v is not None and math.isfinite(v)]
    if len(pairs) < 2:
        return None
    v = np.array([p[0] for p in pairs], float)
    if circular:  # degrees: deviations wrapped about the first value
        v = v[0] + (v - v[0] + 180.0) % 360.0 - 180.0
    boot = np.array([p[1] if p[1] is not None and math.isfinite(p[1]) else 0.0
                     for p in pairs], float)
    return float(math.sqrt(max(0.0, float(np.var(v, ddof=1)) - float(np.mean(boot ** 2)))))


def _plus(sd, rep):
    if rep is None or sd is None:
        return sd
    return float(math.hypot(sd, rep))


def _with_repeatability(est, group):
    """``est`` with each critical's and phase point's sigmas widened by the scatter over
    ``est`` and ``group`` (the other runs of its cycle), and sigma_rep per critical:
    ``(estimate, [{quantity: sigma_rep, 'n_runs': n} per critical])``."""
    if not group:
        return est, [None] * len(est.criticals)
    crits, reps = [], []
    for c in est.criticals:
        near = []
        for g in group:
            cand = [x for x in g.criticals
                    if abs(x.speed_rpm - c.speed_rpm) <= _REP_MATCH_PCT / 100 * c.speed_rpm]
            if cand:
                near.append(min(cand, key=lambda x: abs(x.speed_rpm - c.speed_rpm)))
        allc = [c] + near
        r = {f: _rep_sigma([getattr(x, f) for x in allc], [getattr(x, sd) for x in allc])
             for f, sd in (("speed_rpm", "speed_std_rpm"), ("af", "af_std"),
                           ("af_half_power", "af_half_power_std"),
                           ("peak_amplitude", "peak_amplitude_std"))}
        r["n_runs"] = len(allc)
        reps.append(r)
        crits.append(replace(c, speed_std_rpm=_plus(c.speed_std_rpm, r["speed_rpm"]),
                             af_std=_plus(c.af_std, r["af"]),
                             af_half_power_std=_plus(c.af_half_power_std, r["af_half_power"]),
                             peak_amplitude_std=_plus(c.peak_amplitude_std,
                                                      r["peak_amplitude"])))
    points = []
    for p in est.phase_points:
        same = [p] + [q for g in group for q in g.phase_points
                      if round(q.speed_rpm, 6) == round(p.speed_rpm, 6)]
        lag = _rep_sigma([x.lag_deg for x in same], [x.lag_std_deg for x in same],
                         circular=True)
        amp = _rep_sigma([x.amplitude for x in same], [x.amplitude_std for x in same])
        points.append(replace(p, lag_std_deg=_plus(p.lag_std_deg, lag),
                              amplitude_std=_plus(p.amplitude_std, amp)))
    return replace(est, criticals=tuple(crits), phase_points=tuple(points)), reps


def _rep_json(r) -> dict[str, Any] | None:
    if r is None:
        return None
    return {k: (json_number(v) if isinstance(v, float) else v) for k, v in r.items()}


def _run_json(run) -> dict[str, Any]:
    return dict(id=run.id, label=run.label, cycle=run.cycle, kind=run.kind,
                started_at=run.started_at.isoformat() if run.started_at else None,
                source=run.source_name)


def _load(conn, run_id: int, probes: Sequence[str] | None = None) -> dict[str, Any]:
    run = q.get_run(conn, run_id)
    proc = q.load_processing(conn, run_id)
    if proc is None:
        raise NotFoundError(f"run {run_id} is not processed: run 'rundash process {run_id}' "
                            "first")
    if probes is not None and len(probes) == 1:
        tracks = q.load_tracks(conn, run_id, order=1.0, probe_name=probes[0])
    else:
        tracks = [t for t in q.load_tracks(conn, run_id, order=1.0)
                  if probes is None or t.probe_name in probes]
    return dict(run=run, machine_id=q.run_machine_id(conn, run_id), proc=proc, tracks=tracks)


def _curves(data: dict[str, Any]) -> dict[tuple[str, str], dict[str, Any]]:
    """Per (probe, direction): speed, compensated vector, time, factor, offset std."""
    proc = data["proc"]
    window = proc.slow_roll_rpm
    by_probe: dict[str, dict[bool, Any]] = {}
    for t in data["tracks"]:
        by_probe.setdefault(t.probe_name, {})[t.compensated] = t
    out = {}
    for name, tr in by_probe.items():
        raw = tr.get(False)
        if raw is None or raw.kind not in VECTOR_AMPLITUDE_CONVENTION:
            continue
        afac = vector_amplitude_factor(raw.kind)
        use = tr.get(True) if raw.kind == "proximity" and True in tr else raw
        vec = phasor_from_lag(use.amplitude / afac, use.phase_lag_deg)
        raw_vec = phasor_from_lag(raw.amplitude / afac, raw.phase_lag_deg)
        slow = None
        if window is not None:
            m = (raw.speed_rpm >= window[0]) & (raw.speed_rpm <= window[1])
            if np.count_nonzero(m) >= 2:
                slow = cmp.vector_mean(raw_vec[m])
        offset = slow.std_error if (slow is not None and use is not raw) else 0.0
        for d, sel in direction_masks(use.time_s, proc.segments, min_blocks=MIN_BLOCKS).items():
            out[(name, d)] = dict(speed=use.speed_rpm[sel], vector=vec[sel],
                                  time=use.time_s[sel], afac=afac, offset=offset,
                                  kind=raw.kind, slow=slow)
        if not any(k[0] == name for k in out) and slow is not None:
            out[(name, "none")] = dict(slow=slow, afac=afac, kind=raw.kind)
    return out


def _shift_json(s: cmp.Shift | None) -> dict[str, Any] | None:
    if s is None:
        return None
    return {k: (json_number(v) if isinstance(v, float) else v) for k, v in s.to_json_dict().items()}


def _estimate_json(c: cmp.CriticalEstimate) -> dict[str, Any]:
    return dict(speed_rpm=json_number(c.speed_rpm), speed_std_rpm=json_number(c.speed_std_rpm),
                af=json_number(c.af), af_std=json_number(c.af_std), af_method=c.af_method,
                af_half_power=json_number(c.af_half_power),
                af_half_power_std=json_number(c.af_half_power_std), af_fit_std=json_number(c.af_fit_std),
                peak_amplitude=json_number(c.peak_amplitude),
                peak_amplitude_std=json_number(c.peak_amplitude_std),
                classification=c.classification, confidence=c.confidence,
                sweep_rate_rpm_s=json_number(c.sweep_rate_rpm_s), n_found=c.n_found, n_af=c.n_af,
                n_boot=c.n_boot, reproducible=c.reproducible)


def compare_runs(db: Database, run_ids: Sequence[int], *,
                 phase_speeds_rpm: Sequence[float] | None = None, n_boot: int = 100,
                 block_revs: int = 4, k: float = cmp.K_SIGMA, seed: int = 0,
                 probes: Sequence[str] | None = None) -> dict[str, Any]:
    """Compare processed runs of one machine; the first run is the reference.

    Parameters
    ----------
    db : Database
    run_ids : sequence of int
        Two or more processed runs of one machine; each later run is compared with the
        first.
    phase_speeds_rpm : sequence of float, optional
        Speeds at which lag and 1X are compared; default the machine's minimum operating
        and maximum continuous speeds (where a run covers them).
    n_boot, block_revs, k, seed :
        Bootstrap replicates, block length, significance factor and random seed (see
        :mod:`rundash.analysis.compare`).
    probes : sequence of str, optional
        Compare only these probes (default all). Each probe's results are those of the
        whole comparison (the random seed goes by run, not by probe); the pairs'
        verdicts and the hints then cover these probes only.

    Returns
    -------
    dict
        The comparison JSON (schema ``rundash.comparison/1``).
    """
    ids = list(dict.fromkeys(int(r) for r in run_ids))
    if len(ids) < 2:
        raise InputError(f"Invalid value for 'runs': allowed two or more different run ids, "
                         f"got {list(run_ids)!r}")
    with db.read() as conn:
        data = [_load(conn, r, None if probes is None else list(probes)) for r in ids]
        machine = q.get_machine(conn, data[0]["machine_id"])
    others = [d["run"].id for d in data if d["machine_id"] != data[0]["machine_id"]]
    if others:
        raise InputError(f"Invalid value for 'runs': allowed runs of one machine "
                         f"({machine.spec.name}), got runs {others} of another machine")
    spec = machine.spec
    speeds = [float(x) for x in (phase_speeds_rpm if phase_speeds_rpm is not None else
                                 (spec.min_operating_speed_rpm, spec.max_continuous_speed_rpm))]
    probe_spec = {p.name: p for p in machine.probes}

    estimates: dict[int, dict[tuple[str, str], cmp.CurveEstimate]] = {}
    curves: dict[int, dict] = {}
    for i, d in enumerate(data):
        rid = d["run"].id
        curves[rid] = _curves(d)
        estimates[rid] = {}
        for (name, direction), c in curves[rid].items():
            if direction == "none":
                continue
            estimates[rid][(name, direction)] = cmp.estimate_curve(
                c["speed"], c["vector"], time_s=c["time"], amplitude_factor=c["afac"],
                direction=direction, phase_speeds_rpm=speeds, n_boot=n_boot,
                block_revs=block_revs, offset_std=c["offset"], seed=seed + 7919 * i)

    runs_json = []
    for d in data:
        rid = d["run"].id
        per = []
        for (name, direction), est in sorted(estimates[rid].items()):
            kind = curves[rid][(name, direction)]["kind"]
            per.append(dict(probe=name, direction=direction, kind=kind,
                            units=amplitude_label(kind),
                            sweep_rate_rpm_s=json_number(est.sweep_rate_rpm_s),
                            speed_range_rpm=[json_number(x) for x in est.speed_range_rpm],
                            criticals=[_estimate_json(c) for c in est.criticals]))
        j = _run_json(d["run"])
        j.update(slow_roll_rpm=list(d["proc"].slow_roll_rpm) if d["proc"].slow_roll_rpm
                 else None, estimates=per)
        runs_json.append(j)

    ref = data[0]["run"]
    cycle_of = {d["run"].id: _cycle_key(d["run"]) for d in data}
    pairs = []
    all_hints: list[str] = []
    for d in data[1:]:
        b_run = d["run"]
        probes_json = []
        for (name, da), ea in sorted(estimates[ref.id].items()):
            eb_all = estimates[b_run.id]
            db_ = da if (name, da) in eb_all else next(
                (dd for (n, dd) in eb_all if n == name), None)
            if db_ is None:
                continue
            eb = eb_all[(name, db_)]
            if db_ != da and any(n == name and dd == db_ for (n, dd) in estimates[ref.id]):
                continue  # the other direction of the reference is compared with it
            kind = curves[ref.id][(name, da)]["kind"]
            rep_runs, rep_notes, widened = {}, [], []
            for side, run_, dd, est in (("a", ref, da, ea), ("b", b_run, db_, eb)):
                other = b_run.id if side == "a" else ref.id
                key = cycle_of[run_.id]
                group = [r for r in estimates if r not in (run_.id, other) and key
                         and cycle_of[r] == key and (name, dd) in estimates[r]]
                est_r, reps = _with_repeatability(est, [estimates[r][(name, dd)]
                                                        for r in group])
                widened.append((est_r, reps))
                rep_runs[side] = (dict(runs=[run_.id] + group, cycle=key[0],
                                       test_kind=key[1]) if group else None)
                if group:
                    rep_notes.append(f"run {run_.id}'s uncertainties include the scatter "
                                     f"between runs {', '.join(map(str, [run_.id] + group))} "
                                     f"of cycle '{key[0]}' ({key[1]}, {dd}): run-to-run "
                                     "repeatability")
            if cycle_of[ref.id] and cycle_of[ref.id] == cycle_of[b_run.id] \
                    and rep_runs["a"] is None:
                rep_notes.append(f"runs {ref.id} and {b_run.id} are of one cycle and no other "
                                 "run of it is compared: their run-to-run repeatability cannot "
                                 "be estimated without their own difference, so the "
                                 "uncertainties are the bootstrap's alone")
            (ea_r, rep_a), (eb_r, rep_b) = widened
            rep_of = {id(c): r for c, r in zip(ea_r.criticals, rep_a)}
            rep_of.update({id(c): r for c, r in zip(eb_r.criticals, rep_b)})
            res = cmp.compare_curves(ea_r, eb_r, k=k, kind=kind,
                                     amplitude_units=amplitude_label(kind))
            crit = []
            for m in res.matches:
                crit.append(dict(
                    a=_estimate_json(m.a) if m.a else None,
                    b=_estimate_json(m.b) if m.b else None,
                    speed=_shift_json(m.speed), af=_shift_json(m.af),
                    peak_amplitude=_shift_json(m.peak_amplitude), changed=m.changed,
                    repeatability=dict(a=_rep_json(rep_of.get(id(m.a))),
                                       b=_rep_json(rep_of.get(id(m.b)))),
                    hints=list(m.hints), notes=list(m.notes)))
            sp = probe_spec.get(name)
            probes_json.append(dict(
                probe=name, bearing=sp.bearing if sp else "", axis=sp.axis if sp else "none",
                kind=kind, units=amplitude_label(kind), direction_a=da, direction_b=db_,
                like_with_like=res.like_with_like, notes=list(res.notes) + rep_notes,
                repeatability=rep_runs, criticals=crit, phase=[_shift_json(s) for s in res.phase],
                hints=list(res.hints), verdict=res.verdict))
            all_hints += [f"{name} ({da}): {h}" for h in res.hints]
        slow = []
        names = sorted({n for (n, _d) in curves[ref.id]} & {n for (n, _d) in curves[b_run.id]})
        for name in names:
            ca = next((c for (n, _d), c in curves[ref.id].items() if n == name), None)
            cb = next((c for (n, _d), c in curves[b_run.id].items() if n == name), None)
            if not ca or not cb or ca.get("slow") is None or cb.get("slow") is None \
                    or ca["kind"] != "proximity":
                continue
            afac = ca["afac"]

            def scaled(vm):  # the vector in reported units (p-p for proximity)
                return cmp.VectorMean(afac * vm.mean, afac * vm.std_error, vm.n)
            ch = cmp.compare_vectors(scaled(ca["slow"]), scaled(cb["slow"]), k=k)
            slow.append(dict(
                probe=name, kind=ca["kind"], units=amplitude_label(ca["kind"]),
                a_amplitude=json_number(ch.a.amplitude), a_lag_deg=json_number(ch.a.lag_deg),
                b_amplitude=json_number(ch.b.amplitude), b_lag_deg=json_number(ch.b.lag_deg),
                change=json_number(ch.delta_amplitude), sigma=json_number(ch.sigma),
                significant=ch.significant, material=ch.material, hint=ch.hint))
            if ch.material:
                all_hints.append(f"{name}: {slow[-1]['hint']}")
        changed = any(p["verdict"] == "changed" for p in probes_json) or \
            any(s["material"] for s in slow)
        pairs.append(dict(a=ref.id, b=b_run.id, probes=probes_json, slow_roll=slow,
                          verdict="changed" if changed else "no significant change",
                          like_with_like=all(p["like_with_like"] for p in probes_json)))
    if not any(p["probes"] for p in pairs):
        raise AnalysisError("the runs have no probe and run direction in common to compare")
    return {
        "schema": SCHEMA,
        "machine": dict(name=spec.name, kind=spec.kind, rated_speed_rpm=spec.rated_speed_rpm,
                        min_operating_speed_rpm=spec.min_operating_speed_rpm,
                        max_continuous_speed_rpm=spec.max_continuous_speed_rpm),
        "reference": ref.id,
        "runs": runs_json,
        "pairs": pairs,
        "hints": all_hints,
        "rule": RULE.format(k=k),
        "method": METHOD.format(n_boot=n_boot, block=block_revs),
        "repeatability": REPEATABILITY,
        "phase_speeds_rpm": speeds,
        "caution": CAUTION,
    }
