"""The machine description file (TOML, read with the standard library).

Every key is documented in the README. Validation is complete: an unknown key, a missing
key or an impossible value gives one :class:`~rundash.errors.ConfigError` naming the file
and the key (``[machine].min_operating_speed_rpm``, ``[[probes]] #2 .units``, ...), worded
as every TOML check is (:mod:`rundash.ingest.toml_check`).
"""

from __future__ import annotations

import math
import re
from pathlib import Path
from typing import Literal, get_args, get_origin, get_type_hints

from rundash.conventions import angle_from_top, wrap_deg
from rundash.errors import ConfigError, invalid_value
from rundash.ingest import bounds
from rundash.ingest.toml_check import TomlChecker, parse_toml
from rundash.model import (
    MACHINE_KINDS, TRANSDUCER_KINDS, DataSpec, MachineDescription, MachineSpec,
    ProcessingSpec, ProbeSpec, SiteLevel, TachSpec, ZoneSpec,
)
from rundash.units import TO_STORAGE

_MACHINE_KEYS = {
    "name": (str, True), "kind": (str, True), "rated_speed_rpm": (float, True),
    "min_operating_speed_rpm": (float, True), "max_continuous_speed_rpm": (float, True),
    "trip_speed_rpm": (float, False), "profile": (str, False), "rotation": (str, False),
    "description": (str, False),
}
_TACH_KEYS = {
    "column": (str, True), "pulses_per_rev": (int, False), "edge": (str, False),
    "threshold": (float, False), "hysteresis": (float, False), "angle_deg": (float, False),
}
_PROBE_KEYS = {
    "name": (str, True), "column": (str, True), "kind": (str, True), "units": (str, True),
    "sensitivity_mv_per_unit": (float, False), "angle_deg": (float, False),
    "bearing": (str, False), "axis": (str, False), "pair": (str, False),
}
_DATA_KEYS = {
    "format": (str, False), "time_column": (str, False), "sample_rate_hz": (float, False),
    "full_scale_v": (float, False), "signal_units": (str, False), "dataset": (str, False),
    "delimiter": (str, False), "decimal": (str, False),
}
FORMATS = ("auto", "csv", "wav", "hdf5", "parquet", "mdf")
_ANGLE_TEXT = re.compile(r"^\s*(\d+(?:\.\d*)?)\s*(?:°|º|deg|degrees?)?\s*"
                         r"(L|R|left|right)?\s*$", re.IGNORECASE)


def _angle_text(ck: TomlChecker, kp: str, text: str, rotation: str) -> float:
    """A mounting angle in the trade's form (``"45° L"``, ``"30 deg R"``, ``"0°"``, ``"180°"``:
    degrees left or right of top dead centre viewed from the driver end) as degrees from
    top dead centre in the direction of rotation (:func:`rundash.conventions.angle_from_top`)."""
    m = _ANGLE_TEXT.match(text)
    expected = ("expected a number, or degrees left or right of top dead centre viewed from "
                "the driver end such as \"45° L\" or \"45° R\"")
    if m is None:
        ck.fail(kp, f"{expected}, got {text!r}")
    deg, side = float(m.group(1)), (m.group(2) or "")[:1].upper()
    if not side:
        if deg in (0.0, 180.0):
            return deg
        ck.fail(kp, f"{expected} (say L or R for an angle other than 0° or 180°), got {text!r}")
    if deg > 180.0:
        ck.fail(kp, f"{expected} (at most 180° to either side), got {text!r}")
    return angle_from_top(deg, side, rotation)


def _pop_angle_text(raw: object) -> tuple[object, str | None]:
    """(the table without a text ``angle_deg``, that text or None)."""
    if isinstance(raw, dict) and isinstance(raw.get("angle_deg"), str):
        raw = dict(raw)
        return raw, raw.pop("angle_deg")
    return raw, None


def parse_machine_description(text: str, source: str = "<machine file>") -> MachineDescription:
    """Parse and validate the text of a machine description file."""
    ck = TomlChecker(source)
    raw = parse_toml(text, source)
    unknown = sorted(set(raw) - {"machine", "tach", "probes", "data", "processing", "levels",
                                 "zones"})
    if unknown:
        ck.fail(unknown[0], "unknown table; allowed: [machine], [tach], [[probes]], [data], "
                            "[processing], [[levels]], [zones]")
    for key in ("machine", "tach", "probes"):
        if key not in raw:
            ck.fail(f"[{key}]" if key != "probes" else "[[probes]]", "missing required table")

    m = ck.table(raw["machine"], "[machine]", _MACHINE_KEYS)
    ck.choice("[machine].kind", m["kind"], MACHINE_KINDS)
    for key in ("rated_speed_rpm", "min_operating_speed_rpm", "max_continuous_speed_rpm",
                "trip_speed_rpm"):
        ck.positive(f"[machine].{key}", m.get(key))
        ck.within(f"[machine].{key}", m.get(key), bounds.SPEED_RPM)
    if m["min_operating_speed_rpm"] > m["max_continuous_speed_rpm"]:
        ck.fail("[machine].min_operating_speed_rpm",
                f"minimum operating speed {m['min_operating_speed_rpm']:g} rpm is above the "
                f"maximum continuous speed {m['max_continuous_speed_rpm']:g} rpm")
    if not m["min_operating_speed_rpm"] <= m["rated_speed_rpm"] <= m["max_continuous_speed_rpm"]:
        ck.fail("[machine].rated_speed_rpm",
                f"rated speed {m['rated_speed_rpm']:g} rpm is outside the operating range "
                f"{m['min_operating_speed_rpm']:g}-{m['max_continuous_speed_rpm']:g} rpm")
    trip = m.get("trip_speed_rpm")
    if trip is not None and trip < m["max_continuous_speed_rpm"]:
        ck.fail("[machine].trip_speed_rpm",
                f"trip speed {trip:g} rpm is below the maximum continuous speed "
                f"{m['max_continuous_speed_rpm']:g} rpm")
    if "rotation" in m:
        ck.choice("[machine].rotation", m["rotation"], ("cw", "ccw"))
    ck.non_empty("[machine].name", m["name"])
    machine = MachineSpec(**m)

    rotation = m.get("rotation", "ccw")
    raw_tach, tach_text = _pop_angle_text(raw["tach"])
    t = ck.table(raw_tach, "[tach]", _TACH_KEYS)
    if tach_text is not None:  # the sensor's place from top dead centre
        t["angle_deg"] = _angle_text(ck, "[tach].angle_deg", tach_text, rotation)
    if "edge" in t:
        ck.choice("[tach].edge", t["edge"], ("rising", "falling"))
    if "pulses_per_rev" in t and t["pulses_per_rev"] < 1:
        ck.fail("[tach].pulses_per_rev", f"expected a whole number >= 1, got {t['pulses_per_rev']}")
    ck.within("[tach].pulses_per_rev", t.get("pulses_per_rev"), bounds.PULSES_PER_REV)
    ck.positive("[tach].hysteresis", t.get("hysteresis"))
    ck.within("[tach].hysteresis", t.get("hysteresis"), bounds.HYSTERESIS)
    ck.within("[tach].threshold", t.get("threshold"), bounds.LEVEL)
    ck.within("[tach].angle_deg", t.get("angle_deg"), bounds.ANGLE_DEG)
    tach = TachSpec(**t)

    if not isinstance(raw["probes"], list) or not raw["probes"]:
        ck.fail("[[probes]]", "expected at least one [[probes]] table")
    probes: list[ProbeSpec] = []
    names: set[str] = set()
    columns: set[str] = {tach.column}
    for i, rp in enumerate(raw["probes"], start=1):
        where = f"[[probes]] #{i}"
        rp, angle_text = _pop_angle_text(rp)
        p = ck.table(rp, where, _PROBE_KEYS)
        where = f"[[probes]] {p['name']!r}"
        if angle_text is not None:  # from top dead centre -> from the once-per-rev sensor
            top = _angle_text(ck, f"{where}.angle_deg", angle_text, rotation)
            p["angle_deg"] = float(wrap_deg(top - tach.angle_deg))
        ck.choice(f"{where}.kind", p["kind"], TRANSDUCER_KINDS)
        if p["units"] not in TO_STORAGE:
            ck.fail(f"{where}.units", invalid_value("units", p["units"],
                                                    ", ".join(sorted(TO_STORAGE))))
        if TO_STORAGE[p["units"]][0] != p["kind"]:
            allowed = [u for u, (k, _) in TO_STORAGE.items() if k == p["kind"]]
            ck.fail(f"{where}.units", f"unit {p['units']!r} does not fit a {p['kind']} "
                                      f"transducer; allowed: {', '.join(allowed)}")
        ck.positive(f"{where}.sensitivity_mv_per_unit", p.get("sensitivity_mv_per_unit"))
        ck.within(f"{where}.sensitivity_mv_per_unit", p.get("sensitivity_mv_per_unit"),
                  bounds.SENSITIVITY_MV_PER_UNIT)
        ck.within(f"{where}.angle_deg", p.get("angle_deg"), bounds.ANGLE_DEG)
        if "axis" in p:
            ck.choice(f"{where}.axis", p["axis"], ("X", "Y", "none"))
        if p["name"] in names:
            ck.fail(f"{where}.name", "duplicate probe name")
        if p["column"] in columns:
            ck.fail(f"{where}.column", f"column {p['column']!r} is already used by the tach "
                                       "or another probe")
        names.add(p["name"])
        columns.add(p["column"])
        pair = p.pop("pair", None)
        probes.append(ProbeSpec(**p, pair=pair))
    for p in probes:
        if p.pair is not None and p.pair not in names:
            ck.fail(f"[[probes]] {p.name!r}.pair", f"names no probe: {p.pair!r}")

    d = ck.table(raw.get("data", {}), "[data]", _DATA_KEYS)
    if "format" in d:
        ck.choice("[data].format", d["format"], FORMATS)
    if "signal_units" in d:
        ck.choice("[data].signal_units", d["signal_units"], ("V", "engineering"))
    if "delimiter" in d:
        ck.choice("[data].delimiter", d["delimiter"], ("auto", ",", ";", "\t"))
    if "decimal" in d:
        ck.choice("[data].decimal", d["decimal"], ("auto", ".", ","))
    if d.get("decimal") == "," and d.get("delimiter") == ",":
        ck.fail("[data].decimal", "a decimal comma needs [data].delimiter = \";\" or \"\\t\" "
                "(a comma cannot separate both columns and decimals)")
    ck.positive("[data].sample_rate_hz", d.get("sample_rate_hz"))
    ck.positive("[data].full_scale_v", d.get("full_scale_v"))
    ck.within("[data].sample_rate_hz", d.get("sample_rate_hz"), bounds.SAMPLE_RATE_HZ)
    ck.within("[data].full_scale_v", d.get("full_scale_v"), bounds.FULL_SCALE_V)
    data = DataSpec(**d)
    if data.signal_units == "V":
        for p in probes:
            if p.sensitivity_mv_per_unit is None:
                ck.fail(f"[[probes]] {p.name!r}.sensitivity_mv_per_unit",
                        "missing: [data].signal_units is 'V', so every probe needs its "
                        "sensitivity (or set signal_units = 'engineering')")
    return MachineDescription(machine=machine, tach=tach, probes=tuple(probes), data=data,
                              source=source,
                              processing=_processing(ck, raw.get("processing", {}), machine),
                              levels=_levels(ck, raw.get("levels", []), probes),
                              zones=_zones(ck, raw.get("zones", {}), machine))


def _zone_fields() -> dict[str, tuple[type, tuple | None]]:
    """Each field of :class:`ZoneSpec` → its TOML type and allowed values (None: any),
    read from the field types (one definition of the choices)."""
    out = {}
    for name, tp in get_type_hints(ZoneSpec).items():
        (arg,) = [a for a in get_args(tp) if a is not type(None)]
        out[name] = (str, get_args(arg)) if get_origin(arg) is Literal else (arg, None)
    return out


_ZONE_KEYS = {k: (tp, False) for k, (tp, _) in _zone_fields().items()}
_ZONE_CHOICES = {k: allowed for k, (_, allowed) in _zone_fields().items() if allowed}


def _zones(ck: TomlChecker, raw, machine: MachineSpec) -> ZoneSpec:
    """``[zones]``: the ISO part and class of the vibration zones (module doc of
    :mod:`rundash.analysis.zones`); keys left out take the defaults, said in the output."""
    t = ck.table(raw, "[zones]", _ZONE_KEYS)
    for k, allowed in _ZONE_CHOICES.items():
        if k in t:
            ck.choice(f"[zones].{k}", t[k], allowed)
    part = t.get("part")
    wrong = {"10816-3": ("pump_category", "pump_power"), "10816-7": ("group", "support"),
             "10816-2": ("group", "support", "pump_category", "pump_power")}
    if part is None:
        part = "10816-7" if machine.kind == "pump" else "10816-3"
    for k in wrong[part]:
        if k in t:
            ck.fail(f"[zones].{k}", f"does not apply to ISO {part} (the part "
                    f"{'given' if 'part' in t else 'taken for a ' + machine.kind}); remove it")
    return ZoneSpec(**t)


_LEVEL_KEYS = {"probe": (str, False), "bearing": (str, False), "measure": (str, False),
               "alert": (float, False), "trip": (float, False), "source": (str, True)}


def _levels(ck: TomlChecker, raw, probes) -> tuple[SiteLevel, ...]:
    """``[[levels]]``: site or OEM levels for one probe (``probe``) or every proximity and
    velocity probe of a bearing (``bearing``), ``measure`` 'direct' (default) or '1x',
    ``alert`` and/or ``trip`` in the probe's level convention (um p-p proximity, mm/s rms
    velocity), ``source`` the document they come from."""
    if not isinstance(raw, list) or not all(isinstance(x, dict) for x in raw):
        ck.fail("[[levels]]", f"expected an array of tables, got {raw!r}")
    out: list[SiteLevel] = []
    seen: set[tuple[str, str]] = set()
    by_name = {p.name: p for p in probes}
    for i, item in enumerate(raw, start=1):
        where = f"[[levels]] #{i}"
        t = ck.table(item, where, _LEVEL_KEYS)
        if ("probe" in t) == ("bearing" in t):
            ck.fail(where, "name either probe = \"...\" or bearing = \"...\" (one of them)")
        measure = t.get("measure", "direct")
        ck.choice(f"{where}.measure", measure, ("direct", "1x"))
        alert, trip = t.get("alert"), t.get("trip")
        if alert is None and trip is None:
            ck.fail(where, "give alert = ... or trip = ... (or both), in the probe's level "
                           "units: um p-p for proximity, mm/s rms for velocity")
        ck.positive(f"{where}.alert", alert)
        ck.positive(f"{where}.trip", trip)
        if alert is not None and trip is not None and not alert < trip:
            ck.fail(f"{where}.trip", f"expected a level above alert ({alert:g}), got {trip:g}")
        if not t["source"].strip():
            ck.fail(f"{where}.source", "expected the document the levels come from, got ''")
        if "probe" in t:
            if t["probe"] not in by_name:
                ck.fail(f"{where}.probe", f"names no probe: {t['probe']!r}")
            names = [t["probe"]]
        else:
            names = [p.name for p in probes if p.bearing == t["bearing"]
                     and p.kind in ("proximity", "velocity")]
            if not names:
                ck.fail(f"{where}.bearing", f"no proximity or velocity probe at bearing "
                                            f"{t['bearing']!r}")
        for n in names:
            if by_name[n].kind not in ("proximity", "velocity"):
                ck.fail(f"{where}.probe", f"levels are checked for proximity and velocity "
                                          f"probes; {n!r} is {by_name[n].kind}")
            if (n, measure) in seen:
                ck.fail(where, f"probe {n!r} already has {measure} levels")
            seen.add((n, measure))
            out.append(SiteLevel(n, measure, alert, trip, t["source"].strip()))
    return tuple(out)


#: Trackers a machine description may name in ``[processing] tracker`` (the same names
#: as ``rundash process --tracker``; :data:`rundash.workflows.pipeline.TRACKERS`).
TRACKER_NAMES = ("order", "vold-kalman")


def _processing(ck: TomlChecker, raw, machine: MachineSpec) -> ProcessingSpec:
    """``[processing]``: ``slow_roll_rpm = [low, high]`` in rpm, 0 <= low < high, no higher
    than the maximum continuous speed; ``tracker`` one of :data:`TRACKER_NAMES`."""
    if not isinstance(raw, dict):
        ck.fail("[processing]", f"expected a table, got {raw!r}")
    allowed = {"slow_roll_rpm", "tracker"}
    if set(raw) - allowed:
        ck.fail(f"[processing].{sorted(set(raw) - allowed)[0]}",
                "unknown key; allowed keys: slow_roll_rpm, tracker")
    tracker = raw.get("tracker")
    if tracker is not None and tracker not in TRACKER_NAMES:
        ck.fail("[processing].tracker", f"expected one of {', '.join(map(repr, TRACKER_NAMES))}, "
                                        f"got {tracker!r}")
    band = raw.get("slow_roll_rpm")
    if band is None:
        return ProcessingSpec(tracker=tracker)
    kp = "[processing].slow_roll_rpm"
    if (not isinstance(band, list) or len(band) != 2
            or any(isinstance(b, bool) or not isinstance(b, (int, float)) for b in band)):
        ck.fail(kp, f"expected two numbers [low, high] in rpm, got {band!r}")
    lo, hi = float(band[0]), float(band[1])
    if not (math.isfinite(lo) and math.isfinite(hi) and 0 <= lo < hi):
        ck.fail(kp, f"expected 0 <= low < high in rpm, got [{lo:g}, {hi:g}]")
    if hi > machine.max_continuous_speed_rpm:
        ck.fail(kp, f"expected a band below the maximum continuous speed "
                    f"{machine.max_continuous_speed_rpm:g} rpm (slow roll is read far below "
                    f"it), got [{lo:g}, {hi:g}]")
    return ProcessingSpec(slow_roll_rpm=(lo, hi), tracker=tracker)


def check_profile(desc: MachineDescription) -> None:
    """The guidance profile ``desc`` names exists and is valid: a misspelt name or a broken
    profile file is refused when the run is imported, not when it is processed. A path is
    taken as processing takes it (relative to the current folder)."""
    from rundash.ingest.profile_file import load_profile

    try:
        load_profile(desc.machine.profile)
    except ConfigError as exc:
        raise ConfigError(f"{desc.source}: [machine].profile: {exc}") from None


def load_machine_description(path: str | Path) -> tuple[MachineDescription, str]:
    """Read a machine description file (its guidance profile checked too); returns the
    description and the file's text."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ConfigError(f"{path}: machine description file not found") from None
    except UnicodeDecodeError as exc:
        raise ConfigError(f"{path}: not UTF-8 text ({exc.reason} at byte {exc.start})") from None
    except OSError as exc:
        raise ConfigError(f"{path}: cannot read machine description: {exc.strerror}") from None
    desc = parse_machine_description(text, source=path.name)
    check_profile(desc)
    return desc, text
