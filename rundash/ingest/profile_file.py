"""Guidance profile files: find, read and validate them into :class:`~rundash.analysis.
profiles.Profile` objects (the file layout is documented in :mod:`rundash.analysis.profiles`).

The shipped profiles are package data in ``rundash/analysis/profiles/*.toml``; a user's
profile is any ``.toml`` file. Validation is complete and worded as every TOML check is
(:mod:`rundash.ingest.toml_check`): an unknown key, a missing key or an impossible value
gives one :class:`~rundash.errors.ConfigError` naming the profile and the key
(``margin.below.cap_pct``, ``limits[0].formula``, ...).
"""

from __future__ import annotations

import os
import stat
from importlib import resources
from pathlib import Path

from rundash.analysis.profiles import (
    CONFIDENCES, REFERENCE_SPEEDS, LimitRule, MarginRule, Profile, SideRule, Source,
)
from rundash.analysis.scope import SCOPE_RUN_KINDS, SPEED_CONDITIONS, Scope
from rundash.errors import ConfigError, invalid_value
from rundash.ingest.toml_check import TABLES, TomlChecker, parse_toml

_PACKAGE = "rundash.analysis"
_FOLDER = "profiles"
_SOURCE_KEYS = {"document": (str, True), "edition": (str, True), "clause": (str, True),
                "confidence": (str, True)}
_TOP_KEYS = {"name": (str, True), "title": (str, False), "machine_kinds": (list, False),
             "needs_confirmation": (bool, False), "notes": (str, False),
             "reference_speeds": (dict, False), "margin": (dict, True), "limits": (TABLES, False)}
_MARGIN_KEYS = {"rule": (str, True), "no_margin_below_af": (float, False),
                "damping_exempt_ratio": (float, False), "inside_range": (str, False),
                "below": (dict, True), "above": (dict, True), "scope": (dict, False),
                **_SOURCE_KEYS}
_SIDE_KEYS = {"fixed": {"pct": (float, True)},
              "af-curve": {"base_pct": (float, True), "coefficient_pct": (float, True),
                           "af_offset": (float, True), "cap_pct": (float, True)}}
_LIMIT_KEYS = {"id": (str, True), "title": (str, False), "quantity": (str, True),
               "transducer": (str, True), "formula": (str, True), "cap": (float, True),
               "reference_speed_rpm": (float, False), "applies": (str, False),
               "scope": (dict, False), **_SOURCE_KEYS}
_SCOPE_KEYS = {"run_kinds": (list, False), "speed": (str, False),
               "hold_tolerance_pct": (float, False), "hold_min_s": (float, False),
               "transducers": (list, False), "measures": (list, False)}
_TRANSDUCERS = ("proximity", "velocity", "acceleration")
_MEASURES = ("direct", "1x")


def _scope(ck: TomlChecker, raw, where: str, *, speed: str, transducers=_TRANSDUCERS,
           measures=_MEASURES) -> Scope:
    """The ``scope`` table of a rule; ``speed``, ``transducers`` and ``measures`` are the
    defaults when the table leaves them out (a limit's own transducer and quantity)."""
    t = ck.table(raw or {}, where, _SCOPE_KEYS)
    kinds = tuple(t.get("run_kinds", SCOPE_RUN_KINDS))
    for n, k in enumerate(kinds):
        ck.choice(f"{where}.run_kinds[{n}]", k, SCOPE_RUN_KINDS)
    if not kinds:
        ck.fail(f"{where}.run_kinds", "an empty list: name at least one run kind")
    speed = t.get("speed", speed)
    ck.choice(f"{where}.speed", speed, SPEED_CONDITIONS)
    tol = t.get("hold_tolerance_pct", 1.0)
    ck.in_range(f"{where}.hold_tolerance_pct", tol, 0.0, 10.0, open_lo=True)
    hold_s = t.get("hold_min_s", 0.0)
    ck.in_range(f"{where}.hold_min_s", hold_s, 0.0, 86400.0)
    tr = tuple(t.get("transducers", transducers))
    for n, k in enumerate(tr):
        ck.choice(f"{where}.transducers[{n}]", k, _TRANSDUCERS)
    ms = tuple(t.get("measures", measures))
    for n, k in enumerate(ms):
        ck.choice(f"{where}.measures[{n}]", k, _MEASURES)
    return Scope(kinds, speed, float(tol), float(hold_s), tr, ms)


def _source(ck: TomlChecker, t: dict, where: str) -> Source:
    ck.choice(ck.key(where, "confidence"), t["confidence"], CONFIDENCES)
    return Source(t["document"], t["edition"], t["clause"], t["confidence"])


def _side(ck: TomlChecker, raw, where: str, rule: str) -> SideRule:
    t = ck.table(raw, where, _SIDE_KEYS[rule])
    for k, v in t.items():
        ck.in_range(ck.key(where, k), v, 0.0, 10.0 if k == "af_offset" else 100.0)
    if rule == "fixed":
        return SideRule(t["pct"], 0.0, 0.0, t["pct"])
    return SideRule(t["base_pct"], t["coefficient_pct"], t["af_offset"], t["cap_pct"])


def parse_profile(data: dict, where: str) -> Profile:
    """Validate the parsed TOML of one profile; ``where`` names it in every message."""
    ck = TomlChecker(where)
    top = ck.table(data, "", _TOP_KEYS)
    ck.non_empty("name", top["name"])
    below_ref, above_ref = "min_operating_speed", "max_continuous_speed"
    if "reference_speeds" in top:
        rs = ck.table(top["reference_speeds"], "reference_speeds",
                      {"below": (str, False), "above": (str, False)})
        below_ref, above_ref = rs.get("below", below_ref), rs.get("above", above_ref)
        ck.choice("reference_speeds.below", below_ref, REFERENCE_SPEEDS)
        ck.choice("reference_speeds.above", above_ref, REFERENCE_SPEEDS)
    m = ck.table(top["margin"], "margin", _MARGIN_KEYS)
    ck.choice("margin.rule", m["rule"], tuple(_SIDE_KEYS))
    ck.in_range("margin.no_margin_below_af", m.get("no_margin_below_af"), 1.0, 100.0)
    ck.in_range("margin.damping_exempt_ratio", m.get("damping_exempt_ratio"), 0.0, 1.0,
                open_lo=True)
    inside = m.get("inside_range", "fail")
    ck.choice("margin.inside_range", inside, ("fail",))
    src = _source(ck, m, "margin")
    margin = MarginRule(m["rule"], _side(ck, m["below"], "margin.below", m["rule"]),
                        _side(ck, m["above"], "margin.above", m["rule"]),
                        m.get("no_margin_below_af"), m.get("damping_exempt_ratio"), inside, src,
                        _scope(ck, m.get("scope"), "margin.scope", speed="any",
                               measures=("1x",)))
    limits = []
    for n, item in enumerate(top.get("limits", [])):
        w = f"limits[{n}]"
        lt = ck.table(item, w, _LIMIT_KEYS)
        ck.choice(f"{w}.formula", lt["formula"], ("cap-sqrt-speed", "constant"))
        ck.choice(f"{w}.quantity", lt["quantity"], ("direct", "1x"))
        ck.choice(f"{w}.transducer", lt["transducer"], ("proximity", "velocity"))
        applies = lt.get("applies", "top-speed")
        ck.choice(f"{w}.applies", applies, ("top-speed", "always"))
        ck.in_range(f"{w}.cap", lt["cap"], 0.0, open_lo=True)
        ref = lt.get("reference_speed_rpm")
        if ref is None and lt["formula"] == "cap-sqrt-speed":
            ck.fail(f"{w}.reference_speed_rpm", "missing required key")
        ck.in_range(f"{w}.reference_speed_rpm", ref, 0.0, open_lo=True)
        scope = _scope(ck, lt.get("scope"), f"{w}.scope",
                       speed="top-speed" if applies == "top-speed" else "any",
                       transducers=(lt["transducer"],), measures=(lt["quantity"],))
        limits.append(LimitRule(lt["id"], lt.get("title", ""), lt["quantity"], lt["transducer"],
                                lt["formula"], lt["cap"], ref, applies, _source(ck, lt, w),
                                scope))
    return Profile(top["name"], top.get("title", ""), top.get("machine_kinds", ()),
                   top.get("needs_confirmation", False), top.get("notes", ""), below_ref,
                   above_ref, margin, tuple(limits), where)


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
    name_or_path : str, os.PathLike or Profile
        A name from :func:`list_profiles` (e.g. ``'api617'``), the path of a TOML file,
        or a loaded profile (returned as it is).

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
        raw = read_profile_text(p, where)
    return parse_profile(parse_toml(raw, where), where)


#: A profile file is a page of rules; anything longer is not one.
MAX_PROFILE_BYTES = 256 * 1024


def read_profile_text(path: Path, where: str) -> str:
    """The text of a user's profile file, read only when it is a regular file of at most
    :data:`MAX_PROFILE_BYTES` (a FIFO would block for ever, a device never ends).

    The file is opened without blocking and checked on the open descriptor, so a file
    swapped for a pipe between a check and the read cannot hang the reader.
    """
    try:
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
    except OSError as exc:
        raise ConfigError(f"{where}: cannot be read ({exc.strerror})") from None
    with os.fdopen(fd, "rb") as f:
        st = os.fstat(f.fileno())
        if not stat.S_ISREG(st.st_mode):
            raise ConfigError(f"{where}: not a regular file (a folder, pipe or device cannot "
                              "be a profile); expected a .toml file")
        if st.st_size > MAX_PROFILE_BYTES:
            raise ConfigError(f"{where}: {st.st_size} bytes, more than a profile file holds "
                              f"(at most {MAX_PROFILE_BYTES // 1024} KiB)")
        raw = f.read(MAX_PROFILE_BYTES + 1)
    if len(raw) > MAX_PROFILE_BYTES:
        raise ConfigError(f"{where}: more than a profile file holds (at most "
                          f"{MAX_PROFILE_BYTES // 1024} KiB)")
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise ConfigError(f"{where}: not UTF-8 text ({exc.reason} at byte {exc.start})") from None
