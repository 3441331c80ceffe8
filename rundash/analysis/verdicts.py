"""Separation-margin verdicts per critical and a run summary with a stable JSON form.

Margins are measured from the profile's reference speeds (by default the minimum
operating speed N_min below, the maximum continuous speed N_mc above)::

    below:  SM = 100 (N_ref_below - Nc) / N_ref_below
    above:  SM = 100 (Nc - N_ref_above) / N_ref_above

A critical between N_min and N_mc fails outright unless it is critically damped.
Every verdict is advisory and carries :data:`rundash.CAUTION`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from rundash import CAUTION
from rundash.analysis.borderline import af_readings, borderline_reason, half_power_at_edge
from rundash.analysis.criticals import Critical
from rundash.analysis.limits import LevelCheck
from rundash.analysis.profiles import Profile, as_profile, required_margin_pct
from rundash.errors import ConfigError, invalid_value

SCHEMA = "rundash.run-verdict/1"


def _num(x):
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


@dataclass(frozen=True)
class SpeedMargin:
    """The separation-margin judgement of one critical speed (see :func:`judge_speed`)."""

    side: str
    reference_speed_rpm: float | None
    separation_margin_pct: float | None
    required_margin_pct: float | None
    verdict: str
    reason: str


@dataclass(frozen=True)
class MarginVerdict(SpeedMargin):
    """Separation-margin verdict of one critical: its :class:`SpeedMargin` with the critical
    and the labels of the output.

    ``side`` is ``'below'``, ``'above'`` or ``'inside'`` the operating range;
    ``verdict`` ``'pass'`` | ``'fail'`` | ``'borderline'`` (the verdict turns on which
    AF reading is taken) | ``'not judged'`` | ``'reference only'`` (outside the rule's
    scope) with ``reason``.
    """

    critical: Critical
    probe: str
    direction: str
    amplitude_units: str
    profile: str
    mode_hint: str | None = None
    caution: str = CAUTION

    def to_json_dict(self) -> dict:
        """Plain-JSON form (stable keys; ``None`` for missing numbers)."""
        c = self.critical
        hp, pa, fit = c.half_power, c.phase_af, c.fit
        af_phase = pa.af_45_135 if pa.af_45_135 is not None else pa.af_slope
        return {
            "probe": self.probe,
            "direction": self.direction,
            "speed_rpm": _num(c.speed_rpm),
            "speed_basis": c.speed_basis,
            "peak_speed_rpm": _num(c.peak_speed_rpm),
            "quadrature_speed_rpm": _num(c.quadrature_speed_rpm),
            "peak_amplitude": _num(c.peak_amplitude),
            "amplitude_units": self.amplitude_units,
            "phase_change_deg": _num(c.phase_change_deg),
            "lag_at_peak_deg": _num(c.lag_at_peak_deg),
            "af_half_power": _num(hp.af) if hp is not None else None,
            "af_half_power_note": (hp.reason if hp is not None else "no amplitude peak"),
            "af_phase": _num(af_phase),
            "af_phase_slope": _num(pa.af_slope),
            "af_phase_45_135": _num(pa.af_45_135),
            "af_fit": _num(fit.af) if fit is not None else None,
            "af_fit_std": _num(fit.af_std) if fit is not None else None,
            "damping_ratio_fit": _num(fit.zeta) if fit is not None else None,
            "natural_frequency_fit_rpm": _num(fit.fn_rpm) if fit is not None else None,
            "af_governing": _num(c.af_governing),
            "af_method": c.af_method,
            "critically_damped": c.critically_damped,
            "classification": c.classification,
            "confidence": c.confidence,
            "evidence": list(c.evidence),
            "polar_loop": c.polar_loop,
            "sweep_rate_rpm_s": _num(c.sweep_rate_rpm_s),
            "sweep_note": c.sweep_note,
            "mode_hint": self.mode_hint,
            "side": self.side,
            "reference_speed_rpm": _num(self.reference_speed_rpm),
            "separation_margin_pct": _num(self.separation_margin_pct),
            "required_margin_pct": _num(self.required_margin_pct),
            "margin_verdict": self.verdict,
            "margin_reason": self.reason,
            "profile": self.profile,
        }


@dataclass(frozen=True)
class RunVerdict:
    """Summary of one run's verdicts; ``overall`` is ``'fail'`` if any margin or applying
    limit fails, else ``'borderline'`` if any margin verdict turns on the AF reading, else
    ``'not judged'`` if any critical was not judged, else ``'pass'``."""

    profile: str
    profile_title: str
    profile_needs_confirmation: bool
    profile_source: str
    min_operating_speed_rpm: float
    max_continuous_speed_rpm: float
    overall: str
    margins: tuple[MarginVerdict, ...]
    level_checks: tuple[LevelCheck, ...] = ()
    notes: tuple[str, ...] = field(default_factory=tuple)
    caution: str = CAUTION

    def to_json_dict(self) -> dict:
        """Plain-JSON form with schema ``rundash.run-verdict/1``."""
        return {
            "schema": SCHEMA,
            "profile": {"name": self.profile, "title": self.profile_title,
                        "needs_confirmation": self.profile_needs_confirmation,
                        "margin_source": self.profile_source},
            "operating_range_rpm": [self.min_operating_speed_rpm, self.max_continuous_speed_rpm],
            "overall": self.overall,
            "criticals": [m.to_json_dict() for m in self.margins],
            "limit_checks": [c.to_json_dict() for c in self.level_checks],
            "notes": list(self.notes),
            "caution": self.caution,
        }


def _reference(profile: Profile, which: str, speeds: dict) -> float:
    v = speeds.get(which)
    if v is None:
        raise ConfigError(invalid_value(which + "_rpm", None, f"a speed in rpm (profile {profile.name!r} measures margins from it)"))
    return float(v)


def judge_speed(speed_rpm: float, af: float | None, *, profile, min_operating_speed_rpm: float,
                max_continuous_speed_rpm: float, rated_speed_rpm: float | None = None,
                damping_ratio: float | None = None, confirmed: bool = True,
                af_basis: str | None = None) -> SpeedMargin:
    """Separation-margin verdict of one critical speed with its governing AF.

    The rule of :func:`judge` for one speed: ``confirmed=False`` (the phase does not
    confirm a rotor critical) leaves it ``'not judged'`` unless it is critically damped;
    ``af_basis`` says where the AF comes from (``None``: "AF not determinable"). An AF
    of ``None`` gets the most demanding margin of the rule.

    Examples
    --------
    API 617-style rule (DEVELOPERS.md, Reference values): AF 5 below N_min needs 12.143 %.

    >>> from rundash.ingest.profile_file import load_profile
    >>> m = judge_speed(3500.0, 5.0, profile=load_profile("api617"),
    ...                 min_operating_speed_rpm=4400.0, max_continuous_speed_rpm=5460.0)
    >>> m.side, round(m.separation_margin_pct, 2), round(m.required_margin_pct, 3), m.verdict
    ('below', 20.45, 12.143, 'pass')
    """
    prof = as_profile(profile)
    n_min, n_mc = float(min_operating_speed_rpm), float(max_continuous_speed_rpm)
    speeds = {"min_operating_speed": n_min, "max_continuous_speed": n_mc,
              "rated_speed": rated_speed_rpm}
    m = prof.margin
    nc, zeta = float(speed_rpm), damping_ratio
    if nc < n_min:
        side, ref = "below", _reference(prof, prof.reference_below, speeds)
        sm = 100.0 * (ref - nc) / ref
    elif nc > n_mc:
        side, ref = "above", _reference(prof, prof.reference_above, speeds)
        sm = 100.0 * (nc - ref) / ref
    else:
        side, ref, sm = "inside", None, None
    cd = af is not None and m.no_margin_below_af is not None and af < m.no_margin_below_af
    exempt = (zeta is not None and m.damping_exempt_ratio is not None
              and zeta >= m.damping_exempt_ratio)
    req = None if side == "inside" else required_margin_pct(prof, af, side,
                                                             damping_ratio=zeta)
    if cd:
        verdict = "pass"
        reason = (f"critically damped (AF {af:.2f} < {m.no_margin_below_af:g}): no separation "
                  f"margin required ({m.source.cite()})")
        req = 0.0
    elif exempt:
        verdict = "pass"
        reason = (f"damping ratio {zeta:.2f} from the modal fit reaches "
                  f"{m.damping_exempt_ratio:g}: no separation margin required "
                  f"({m.source.cite()})")
        req = 0.0
    elif not confirmed:
        verdict = "not judged"
        reason = ("the phase does not confirm a rotor critical (possible structural resonance "
                  "or runout artefact): review the Bode and polar plots before judging")
    elif side == "inside":
        verdict = "fail"
        reason = (f"critical at {nc:.0f} rpm lies inside the operating range "
                  f"{n_min:.0f}-{n_mc:.0f} rpm")
    else:
        verdict = "pass" if sm >= req else "fail"
        basis = af_basis or "AF not determinable: the most demanding margin of the rule applied"
        reason = (f"margin {sm:.1f} % {side} the {'N_min' if side == 'below' else 'N_mc'} "
                  f"reference, required {req:.1f} % ({basis}; {m.source.cite()})")
        if m.damping_exempt_ratio is not None and zeta is None:
            reason += "; no fitted damping ratio, so the damping exemption could not be used"
    return SpeedMargin(side, ref, sm, req, verdict, reason)


def judge(criticals, *, min_operating_speed_rpm: float, max_continuous_speed_rpm: float,
          profile, rated_speed_rpm: float | None = None, probe: str = "",
          amplitude_units: str = "", mode_hints=None,
          run_kind: str | None = None, data_range_rpm=None) -> tuple[MarginVerdict, ...]:
    """Separation-margin verdict of each critical against a guidance profile.

    Parameters
    ----------
    criticals : sequence of Critical
        From :func:`rundash.analysis.find_criticals` (one probe, one direction).
    min_operating_speed_rpm, max_continuous_speed_rpm : float
        Operating range N_min..N_mc in rpm.
    profile : Profile
        Guidance profile (:func:`rundash.ingest.profile_file.load_profile`).
    rated_speed_rpm : float, optional
        Needed only when the profile measures a margin from the rated speed.
    probe, amplitude_units : str
        Labels carried into the output (given by the caller).
    mode_hints : sequence of str or None, optional
        A mode-shape hint per critical, carried into the output.
    run_kind : str, optional
        What the stretch is (``'run-up'``, ``'coast-down'``, ``'shop-test'``,
        ``'trip-test'``, :mod:`rundash.analysis.scope`): outside the margin rule's scope
        each verdict is ``'reference only'``. ``None`` applies the rule.
    data_range_rpm : (float, float), optional
        Lowest and highest speed of the data the criticals were found in: half-power
        points nearer its ends than :data:`rundash.analysis.borderline.EDGE_FRACTION` of
        the bandwidth are at the edge (:mod:`rundash.analysis.borderline`).

    A verdict that turns on which AF reading is taken (the AF straddling the rule's
    threshold, or the margin found within the spread of the margin required) is
    ``'borderline'``, with both readings in the reason.

    Returns
    -------
    tuple of MarginVerdict
    """
    prof = as_profile(profile)
    n_min, n_mc = float(min_operating_speed_rpm), float(max_continuous_speed_rpm)
    if not (n_min > 0 and n_mc >= n_min):
        raise ConfigError(invalid_value("min_operating_speed_rpm/max_continuous_speed_rpm",
                                        (min_operating_speed_rpm, max_continuous_speed_rpm),
                                        "0 < N_min <= N_mc in rpm"))
    crits = tuple(criticals)
    if mode_hints is not None and len(mode_hints) != len(crits):
        raise ConfigError(invalid_value("mode_hints", f"{len(mode_hints)} hints", f"one per critical ({len(crits)})"))
    out = []
    for k, c in enumerate(crits):
        af = c.af_governing
        margin = judge_speed(
            c.speed_rpm, af, profile=prof, min_operating_speed_rpm=n_min,
            max_continuous_speed_rpm=n_mc, rated_speed_rpm=rated_speed_rpm,
            damping_ratio=c.fit.zeta if c.fit is not None else None,
            confirmed=c.classification != "amplitude-only",
            af_basis=(f"AF {af:.2f} by {c.af_method}" if af is not None else None))
        verdict, reason = margin.verdict, margin.reason
        if verdict in ("pass", "fail") and c.classification != "amplitude-only":
            def one(a, z, c=c):
                mm = judge_speed(c.speed_rpm, a, profile=prof, min_operating_speed_rpm=n_min,
                                 max_continuous_speed_rpm=n_mc, rated_speed_rpm=rated_speed_rpm,
                                 damping_ratio=z, af_basis=f"AF {a:.2f}")
                return mm.verdict, mm.reason
            why = borderline_reason(c, af_readings(c, data_range_rpm), one)
            edge = half_power_at_edge(c, data_range_rpm)
            if why:
                verdict, reason = "borderline", why + (f". {edge}" if edge else "")
            elif edge:
                reason += f"; {edge}, and every reading gives this verdict"
        if run_kind is not None and not prof.margin.scope.covers(run_kind):
            verdict = "reference only"
            reason = (f"the margin rule applies to: {prof.margin.scope.describe()}; this run "
                      f"is a {run_kind}, so the margin is shown for reference only. {reason}")
        out.append(MarginVerdict(**{**vars(margin), "verdict": verdict, "reason": reason},
                                 critical=c, probe=probe, direction=c.direction,
                                 amplitude_units=amplitude_units, profile=prof.name,
                                 mode_hint=None if mode_hints is None else mode_hints[k]))
    return tuple(out)


def summarize(margins, *, profile, min_operating_speed_rpm: float, max_continuous_speed_rpm: float,
              level_checks=(), top_speed_rpm: float | None = None) -> RunVerdict:
    """Run summary of margin verdicts and level checks; carries :data:`rundash.CAUTION`.

    ``top_speed_rpm`` is the highest speed the run reached: below the minimum operating
    speed the run says nothing of the speeds between it and the range, where a critical
    may lie, so it is at best ``'not judged'`` (a failing margin still fails).
    """
    prof = as_profile(profile)
    margins, checks = tuple(margins), tuple(level_checks)
    notes = []
    conf = prof.confidence_note()
    if conf:
        notes.append(conf)
    verdicts = [m.verdict for m in margins]
    short = top_speed_rpm is not None and top_speed_rpm < float(min_operating_speed_rpm)
    if "fail" in verdicts or any(c.status == "exceeds" for c in checks):
        overall = "fail"
    elif "borderline" in verdicts:
        overall = "borderline"
    elif "not judged" in verdicts or short:
        overall = "not judged"
    else:
        overall = "pass"
    alert = [c for c in checks if c.status == "above alert"]
    if alert:
        worst = max(alert, key=lambda c: c.level)
        notes.append(f"site alert level exceeded {len(alert)} time(s), highest {worst.level:.3g} "
                     f"{worst.units} at {worst.speed_rpm:.0f} rpm ({worst.where}; "
                     f"{worst.note}; {worst.source}): not a failure of the run, to be reviewed")
    if short:
        notes.append(f"the run never reached the operating range: top speed {top_speed_rpm:.0f} "
                     f"rpm, range {float(min_operating_speed_rpm):.0f}-"
                     f"{float(max_continuous_speed_rpm):.0f} rpm; a critical between them cannot "
                     f"be seen, so the run is not judged")
    if not margins:
        notes.append("no critical speed found in the speed range of the run")
    if any(c.status == "reference only" for c in checks) or "reference only" in verdicts:
        notes.append("values marked 'reference only' are shown for orientation: each rule is "
                     "judged only inside its scope (run kind, speed condition, transducer, "
                     "measure), and zones are not verdicts during transients")
    return RunVerdict(prof.name, prof.title, conf is not None, prof.margin.source.cite_full(),
                      float(min_operating_speed_rpm), float(max_continuous_speed_rpm), overall,
                      margins, checks, tuple(notes))
