"""Guidance profiles: separation-margin rules and vibration limits, and their evaluation.

A profile is data: a TOML file, read and validated by
:func:`rundash.ingest.profile_file.load_profile` (the ones rundash ships live in
``rundash/analysis/profiles/``, one file per profile; a user may give the path of a file
of their own, e.g. built from a purchase specification). This module holds the rule
objects a loaded profile is made of and the evaluation of its margin rule; it reads no
file. Every rule carries its document, edition, clause and a confidence flag:
``'stated'`` (checked against the text), ``'from memory'`` or ``'by analogy'`` (a rule
applied outside its document's scope).

File layout (keys not listed are refused, naming the key)::

    name, title, machine_kinds, needs_confirmation, notes
    [reference_speeds]  below, above      one of 'min_operating_speed',
                                          'max_continuous_speed', 'rated_speed'
    [margin]            rule = 'af-curve' | 'fixed', no_margin_below_af,
                        damping_exempt_ratio, inside_range = 'fail',
                        document, edition, clause, confidence
    [margin.below] / [margin.above]
        af-curve:       base_pct, coefficient_pct, af_offset, cap_pct
                        required = min(cap, base + coefficient (1 - 1/(AF - offset)))
        fixed:          pct
    [[limits]]          id, title, quantity = 'direct' | '1x',
                        transducer = 'proximity' | 'velocity',
                        formula = 'cap-sqrt-speed' (min(cap, cap sqrt(ref / N_mc)))
                                | 'constant' (cap), cap, reference_speed_rpm,
                        applies = 'top-speed' | 'always' (the speed condition
                        when no scope table says otherwise),
                        document, edition, clause, confidence
    [margin.scope] / [limits.scope]   where the rule applies (rundash.analysis.scope):
                        run_kinds (of 'run-up', 'coast-down', 'steady', 'shop-test',
                        'trip-test'; default all), speed = 'any' | 'top-speed' |
                        'hold-at-max-continuous' | 'hold-in-operating-range',
                        hold_tolerance_pct, hold_min_s, transducers, measures
                        Outside its scope a rule is shown as 'reference only'.

All results are advisory (see :data:`rundash.CAUTION`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

from rundash.analysis.scope import Scope
from rundash.errors import ConfigError, invalid_value

Confidence = Literal["stated", "from memory", "by analogy"]
CONFIDENCES = ("stated", "from memory", "by analogy")
REFERENCE_SPEEDS = ("min_operating_speed", "max_continuous_speed", "rated_speed")


@dataclass(frozen=True)
class Source:
    """Where a rule comes from and how sure we are of it."""

    document: str
    edition: str
    clause: str
    confidence: str

    def cite(self) -> str:
        """'document, edition, clause': the confidence is said once for the whole profile
        (:meth:`Profile.confidence_note`), not on every line that cites the rule."""
        return f"{self.document}, {self.edition}, {self.clause}"

    def cite_full(self) -> str:
        """:meth:`cite` with the confidence flag, for the profile's table of rules."""
        return f"{self.cite()} ({self.confidence})"


@dataclass(frozen=True)
class SideRule:
    """Required margin on one side: ``min(cap, base + coefficient (1 - 1/(AF - offset)))``.

    A fixed margin has ``coefficient_pct = 0`` and ``base_pct = cap_pct``.
    """

    base_pct: float
    coefficient_pct: float
    af_offset: float
    cap_pct: float


@dataclass(frozen=True)
class MarginRule:
    rule: str
    below: SideRule
    above: SideRule
    no_margin_below_af: float | None
    damping_exempt_ratio: float | None
    inside_range: str
    source: Source
    scope: Scope = Scope()


@dataclass(frozen=True)
class LimitRule:
    id: str
    title: str
    quantity: str
    transducer: str
    formula: str
    cap: float
    reference_speed_rpm: float | None
    applies: str
    source: Source
    scope: Scope = Scope()

    def value(self, max_continuous_speed_rpm: float) -> float:
        """Limit value (um p-p for proximity, mm/s rms for velocity)."""
        if self.formula == "constant":
            return self.cap
        return min(self.cap, self.cap * math.sqrt(self.reference_speed_rpm / max_continuous_speed_rpm))


@dataclass(frozen=True)
class Profile:
    """A guidance profile (see the module doc for the file layout)."""

    name: str
    title: str
    machine_kinds: tuple[str, ...]
    needs_confirmation: bool
    notes: str
    reference_below: str
    reference_above: str
    margin: MarginRule
    limits: tuple[LimitRule, ...]
    origin: str

    def confidence_note(self) -> str | None:
        """One statement of how sure the profile's values are and what to confirm, or
        None when every rule is stated (checked against its text) and the profile does
        not ask for confirmation. Said once, at the top of the findings, the dashboard's
        verdict and the report."""
        rules = [("the separation-margin rule", self.margin.source)] + [
            (f"the limit '{lim.title or lim.id}'", lim.source) for lim in self.limits]
        doubtful = [(what, src) for what, src in rules if src.confidence != "stated"]
        if not doubtful and not self.needs_confirmation:
            return None
        how = sorted({src.confidence for _, src in doubtful})
        what = "; ".join(f"{w} ({src.document}, {src.clause})" for w, src in doubtful)
        return (f"Guidance profile {self.name!r}: its values are "
                f"{' or '.join(how) if how else 'to be confirmed'}, not checked against the "
                f"text of the standard. Confirm against the edition your purchase "
                f"specification cites before relying on the verdict: {what}."
                + (f" {self.notes}" if self.notes else ""))


def as_profile(profile) -> Profile:
    """``profile`` itself when it is a loaded :class:`Profile`; a clear error otherwise
    (a name or path is loaded by :func:`rundash.ingest.profile_file.load_profile`)."""
    if not isinstance(profile, Profile):
        raise ConfigError(invalid_value(
            "profile", profile, "a loaded Profile (rundash.ingest.profile_file.load_profile "
            "reads a shipped profile by name or a profile file)"))
    return profile


def required_margin_pct(profile, af: float | None, side: Literal["below", "above"], *,
                        damping_ratio: float | None = None) -> float:
    """Separation margin (percent of the reference speed) a critical needs on one side.

    ``af`` is the critical's governing amplification factor; ``None`` (unknown) gets the
    most demanding value of the rule (its cap). A critical with ``af`` below the
    profile's ``no_margin_below_af`` needs none ("critically damped"); so does one whose
    ``damping_ratio`` reaches the profile's ``damping_exempt_ratio``.

    Examples
    --------
    API 617-style rule (check values derived from the rule): AF 5 needs 12.143 % below
    the minimum operating speed and 22.143 % above the maximum continuous speed.

    >>> from rundash.ingest.profile_file import load_profile
    >>> p = load_profile("api617")
    >>> round(required_margin_pct(p, 5.0, "below"), 3), round(required_margin_pct(p, 5.0, "above"), 3)
    (12.143, 22.143)
    """
    if side not in ("below", "above"):
        raise ConfigError(invalid_value("side", side, "'below' or 'above'"))
    profile = as_profile(profile)
    if af is not None and not (isinstance(af, (int, float)) and af > 0):
        raise ConfigError(invalid_value("af", af, "a positive amplification factor or None"))
    m = profile.margin
    r = m.below if side == "below" else m.above
    if damping_ratio is not None and m.damping_exempt_ratio is not None \
            and damping_ratio >= m.damping_exempt_ratio:
        return 0.0
    if af is None:
        return r.cap_pct
    if m.no_margin_below_af is not None and af < m.no_margin_below_af:
        return 0.0
    if m.rule == "fixed" or r.coefficient_pct == 0:
        return r.cap_pct
    if af - r.af_offset <= 0:
        return r.cap_pct
    return float(min(r.cap_pct, max(0.0, r.base_pct + r.coefficient_pct * (1.0 - 1.0 / (af - r.af_offset)))))
