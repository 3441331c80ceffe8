"""Guidance profiles: separation-margin rules and vibration limits, held as data.

A profile is a TOML file: the ones rundash ships live in ``rundash/analysis/profiles/``
(one file per profile; files whose name starts with ``_`` hold shared tables, not
profiles), and a user may give the path of a file of their own (e.g. built from a
purchase specification). Every rule carries its document, edition, clause and a
confidence flag: ``'stated'`` (checked against the text), ``'from memory'`` or
``'by analogy'`` (a rule applied outside its document's scope).

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
                        applies = 'top-speed' | 'always',
                        document, edition, clause, confidence

All results are advisory (see :data:`rundash.CAUTION`).
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass
from importlib import resources
from pathlib import Path
from typing import Literal

from rundash.errors import ConfigError, invalid_value

Confidence = Literal["stated", "from memory", "by analogy"]
CONFIDENCES = ("stated", "from memory", "by analogy")
REFERENCE_SPEEDS = ("min_operating_speed", "max_continuous_speed", "rated_speed")
_PACKAGE = "rundash.analysis"
_FOLDER = "profiles"


@dataclass(frozen=True)
class Source:
    """Where a rule comes from and how sure we are of it."""

    document: str
    edition: str
    clause: str
    confidence: str

    def cite(self) -> str:
        return f"{self.document}, {self.edition}, {self.clause} ({self.confidence})"


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


# --------------------------------------------------------------------------- validation
class _Table:
    """A TOML table that hands out keys once and refuses the ones nobody asked for."""

    def __init__(self, data, path: str, where: str):
        if not isinstance(data, dict):
            raise ConfigError(f"{where}: " + invalid_value(path or "profile", type(data).__name__, "a table"))
        self.data, self.path, self.where, self.used = data, path, where, set()

    def key(self, k: str) -> str:
        return f"{self.path}.{k}" if self.path else k

    def get(self, k, kind, default=..., allowed=None):
        self.used.add(k)
        if k not in self.data:
            if default is ...:
                raise ConfigError(f"{self.where}: missing key {self.key(k)!r}")
            return default
        v = self.data[k]
        if kind is float:
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
                raise ConfigError(f"{self.where}: " + invalid_value(self.key(k), v, "a finite number"))
            v = float(v)
        elif kind is str:
            if not isinstance(v, str):
                raise ConfigError(f"{self.where}: " + invalid_value(self.key(k), v, "a string"))
        elif kind is bool:
            if not isinstance(v, bool):
                raise ConfigError(f"{self.where}: " + invalid_value(self.key(k), v, "true or false"))
        elif kind is list:
            if not (isinstance(v, list) and all(isinstance(x, str) for x in v)):
                raise ConfigError(f"{self.where}: " + invalid_value(self.key(k), v, "a list of strings"))
            v = tuple(v)
        if allowed is not None and v not in allowed:
            raise ConfigError(f"{self.where}: " + invalid_value(self.key(k), v, ", ".join(map(repr, allowed))))
        return v

    def number(self, k, lo=None, hi=None, default=..., open_lo=False):
        v = self.get(k, float, default)
        if v is None:
            return v
        bad = (lo is not None and (v <= lo if open_lo else v < lo)) or (hi is not None and v > hi)
        if bad:
            rng = f"{'>' if open_lo else '>='} {lo:g}" + (f" and <= {hi:g}" if hi is not None else "")
            raise ConfigError(f"{self.where}: " + invalid_value(self.key(k), v, f"a number {rng}"))
        return v

    def table(self, k, default=...):
        self.used.add(k)
        if k not in self.data:
            if default is ...:
                raise ConfigError(f"{self.where}: missing table {self.key(k)!r}")
            return None
        return _Table(self.data[k], self.key(k), self.where)

    def only(self, *keys):
        """Refuse unknown keys before reading any (so a misspelt key is named first)."""
        extra = sorted(set(self.data) - set(keys))
        if extra:
            raise ConfigError(f"{self.where}: unknown key {self.key(extra[0])!r}")
        return self

    def done(self):
        extra = sorted(set(self.data) - self.used)
        if extra:
            raise ConfigError(f"{self.where}: unknown key {self.key(extra[0])!r}")


def _source(t: _Table) -> Source:
    return Source(t.get("document", str), t.get("edition", str), t.get("clause", str),
                  t.get("confidence", str, allowed=CONFIDENCES))


_SOURCE_KEYS = ("document", "edition", "clause", "confidence")


def _side(t: _Table, rule: str) -> SideRule:
    t.only(*(("pct",) if rule == "fixed" else ("base_pct", "coefficient_pct", "af_offset", "cap_pct")))
    if rule == "fixed":
        pct = t.number("pct", 0.0, 100.0)
        out = SideRule(pct, 0.0, 0.0, pct)
    else:
        out = SideRule(t.number("base_pct", 0.0, 100.0), t.number("coefficient_pct", 0.0, 100.0),
                       t.number("af_offset", 0.0, 10.0), t.number("cap_pct", 0.0, 100.0))
    t.done()
    return out


def _parse(data: dict, where: str) -> Profile:
    top = _Table(data, "", where).only("name", "title", "machine_kinds", "needs_confirmation",
                                       "notes", "reference_speeds", "margin", "limits")
    name = top.get("name", str)
    if not name.strip():
        raise ConfigError(f"{where}: " + invalid_value("name", name, "a non-empty name"))
    title = top.get("title", str, "")
    kinds = top.get("machine_kinds", list, ())
    confirm = top.get("needs_confirmation", bool, False)
    notes = top.get("notes", str, "")
    rs = top.table("reference_speeds", default=None)
    below_ref, above_ref = "min_operating_speed", "max_continuous_speed"
    if rs is not None:
        rs.only("below", "above")
        below_ref = rs.get("below", str, below_ref, allowed=REFERENCE_SPEEDS)
        above_ref = rs.get("above", str, above_ref, allowed=REFERENCE_SPEEDS)
        rs.done()
    m = top.table("margin").only("rule", "no_margin_below_af", "damping_exempt_ratio",
                                 "inside_range", "below", "above", *_SOURCE_KEYS)
    rule = m.get("rule", str, allowed=("af-curve", "fixed"))
    no_margin = m.number("no_margin_below_af", 1.0, 100.0, default=None)
    exempt = m.number("damping_exempt_ratio", 0.0, 1.0, default=None, open_lo=True)
    inside = m.get("inside_range", str, "fail", allowed=("fail",))
    src = _source(m)
    below = _side(m.table("below"), rule)
    above = _side(m.table("above"), rule)
    m.done()
    margin = MarginRule(rule, below, above, no_margin, exempt, inside, src)
    limits = []
    raw = top.data.get("limits", [])
    top.used.add("limits")
    if not isinstance(raw, list):
        raise ConfigError(f"{where}: " + invalid_value("limits", raw, "an array of tables [[limits]]"))
    for n, item in enumerate(raw):
        lt = _Table(item, f"limits[{n}]", where).only(
            "id", "title", "quantity", "transducer", "formula", "cap", "reference_speed_rpm",
            "applies", *_SOURCE_KEYS)
        formula = lt.get("formula", str, allowed=("cap-sqrt-speed", "constant"))
        lim = LimitRule(
            lt.get("id", str), lt.get("title", str, ""),
            lt.get("quantity", str, allowed=("direct", "1x")),
            lt.get("transducer", str, allowed=("proximity", "velocity")),
            formula, lt.number("cap", 0.0, open_lo=True),
            lt.number("reference_speed_rpm", 0.0, open_lo=True,
                      default=... if formula == "cap-sqrt-speed" else None),
            lt.get("applies", str, "top-speed", allowed=("top-speed", "always")),
            _source(lt))
        lt.done()
        limits.append(lim)
    top.done()
    return Profile(name, title, kinds, confirm, notes, below_ref, above_ref, margin,
                   tuple(limits), where)


# --------------------------------------------------------------------------- public API
def _shipped() -> dict[str, object]:
    folder = resources.files(_PACKAGE).joinpath(_FOLDER)
    return {p.name[:-5]: p for p in folder.iterdir()
            if p.name.endswith(".toml") and not p.name.startswith("_")}


def list_profiles() -> tuple[str, ...]:
    """Names of the profiles shipped with rundash, sorted."""
    return tuple(sorted(_shipped()))


def load_profile(name_or_path) -> Profile:
    """Load a shipped profile by name, or a user's profile file by path.

    Parameters
    ----------
    name_or_path : str or os.PathLike
        A name from :func:`list_profiles` (e.g. ``'api617'``) or the path of a TOML file.

    Raises
    ------
    rundash.errors.ConfigError
        Unknown profile, unreadable file, or an invalid or unknown key (the message names
        the key, e.g. ``'margin.below.cap_pct'``).
    """
    if isinstance(name_or_path, Profile):
        return name_or_path
    shipped = _shipped()
    text = str(name_or_path)
    if not isinstance(name_or_path, Path) and text in shipped:
        where = f"profile {text!r}"
        raw = shipped[text].read_text(encoding="utf-8")
    else:
        p = Path(name_or_path)
        if not p.suffix == ".toml" and not p.exists():
            raise ConfigError(invalid_value("profile", text, ", ".join(map(repr, sorted(shipped)))
                                            + " or the path of a .toml file"))
        where = f"profile file {p.name!r}"
        try:
            raw = p.read_text(encoding="utf-8")
        except OSError as exc:
            raise ConfigError(f"{where}: cannot be read ({exc.strerror})") from None
    try:
        data = tomllib.loads(raw)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{where}: not valid TOML ({exc})") from None
    return _parse(data, where)


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

    >>> p = load_profile("api617")
    >>> round(required_margin_pct(p, 5.0, "below"), 3), round(required_margin_pct(p, 5.0, "above"), 3)
    (12.143, 22.143)
    """
    profile = load_profile(profile)
    if side not in ("below", "above"):
        raise ConfigError(invalid_value("side", side, "'below' or 'above'"))
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


def reference_zones() -> dict:
    """The shared reference-zone tables (ISO shaft displacement and bearing velocity)."""
    raw = resources.files(_PACKAGE).joinpath(_FOLDER, "_reference-zones.toml").read_text(encoding="utf-8")
    return tomllib.loads(raw)
