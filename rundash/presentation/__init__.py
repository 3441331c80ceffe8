"""Presentation: findings and comparison JSON turned into rows of formatted cells.

One rendering for every face: the CLI prints these cells, the dashboard puts them in its
tables and the report in its HTML, so the three show the same numbers, units and words.
Pure: plain dicts in, strings out, no I/O.

Numbers
    :func:`number` (thousands separated, ``–`` when missing or not finite),
    :func:`plus_minus` (a value with its one-sigma uncertainty, the sigma to two
    significant digits), :func:`amplitude` (a level in the chosen unit system with its
    unit and pp / pk / rms).
Findings (schema ``rundash.findings/1``)
    :func:`critical_rows`, :func:`limit_rows` (a velocity overall with its band),
    :func:`level_title`, :func:`direction_rows`,
    :func:`bearing_lines`, :func:`rising_lines`, :func:`summary_line`,
    :func:`verdict_reasons`, :func:`evidence_rows`, :func:`warnings_of`.
Comparison (schema ``rundash.comparison/1``)
    :func:`run_name`, :func:`shift_rows`, :func:`phase_rows`, :func:`slow_roll_rows`.
Both
    :func:`operating_range`, :func:`probe_kinds`, :func:`direction_label`.

The transducer kind of each probe comes from the findings' ``probes`` table (written
since the findings carry it) or, for findings stored before, from the ``kinds`` a face
passes (the run's channels): a unit string is never parsed back into a kind.
"""

from __future__ import annotations

import math
import re
from typing import Any, Mapping, Sequence

from rundash.units import LEVEL_CONVENTION, VECTOR_AMPLITUDE_CONVENTION, display_unit, to_display

MISSING = "–"
Kinds = Mapping[str, str]


# ----------------------------------------------------------------------------- text
_ASCII_UM = re.compile(r"(?<![\w/])um(?=\b)")


def display_text(text: Any) -> str:
    """A message stored in ASCII (events, warnings: ``um``) with the unit spelled as on
    screen (``µm``); the CLI prints the stored ASCII form."""
    return _ASCII_UM.sub("µm", str(text))


# ----------------------------------------------------------------------------- numbers
def _finite(x: Any) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)


def number(x: Any, digits: int = 0, unit: str = "", *, sign: bool = False) -> str:
    """``x`` with ``digits`` decimals and thousands separated, then ``unit``; ``–`` when
    missing or not finite; text passes through.

    >>> number(4400.0), number(20.46, 1, "%"), number(None), number(-3.25, 1, sign=True)
    ('4,400', '20.5 %', '–', '-3.2')
    """
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return MISSING
    if not _finite(x):
        return str(x)
    txt = f"{x:{'+' if sign else ''},.{digits}f}"
    return f"{txt} {unit}" if unit else txt


def sigma_text(sigma: Any) -> str:
    """A one-sigma uncertainty to two significant digits ('0.39', '12')."""
    return f"{sigma:.2g}" if _finite(sigma) else MISSING


def plus_minus(value: Any, sigma: Any, digits: int, unit: str = "", *,
               sign: bool = False) -> str:
    """``value ± sigma unit``: the value with ``digits`` decimals, the sigma to two
    significant digits; without a sigma the value alone.

    >>> plus_minus(-146.04, 0.391, 1, "rpm", sign=True), plus_minus(4.8, None, 2)
    ('-146.0 ± 0.39 rpm', '4.80')
    """
    if not _finite(value):
        return MISSING
    txt = number(value, digits, sign=sign)
    if _finite(sigma):
        txt += f" ± {sigma_text(sigma)}"
    return f"{txt} {unit}" if unit else txt


def significant(x: float) -> str:
    """Three significant digits, trailing zeros dropped, no exponent below 1000."""
    return f"{x:.3g}" if abs(x) < 1000 else f"{x:,.0f}"


def unit_text(kind: str, convention: str, system: str = "metric") -> str:
    """'µm pp', 'mil pp', 'mm/s rms', ... for a transducer kind and a convention."""
    return f"{display_unit(kind, system).replace('um', 'µm')} {convention}".strip()


def amplitude(value: Any, kind: str | None, convention: str, system: str = "metric",
              *, fallback_units: str = "") -> str:
    """A level stored in the storage unit of ``kind``, shown in ``system`` with its unit
    and convention ('pp', 'pk', 'rms'). Without a known kind the value is shown as the
    findings state it (``fallback_units``).

    >>> amplitude(50.8, "proximity", "pp"), amplitude(50.8, "proximity", "pp", "imperial")
    ('50.8 µm pp', '2 mil pp')
    """
    if not _finite(value):
        return MISSING
    if kind not in VECTOR_AMPLITUDE_CONVENTION:
        return f"{significant(float(value))} {fallback_units.replace('um', 'µm')}".strip()
    v = float(to_display(float(value), kind, system))
    return f"{significant(v)} {unit_text(kind, convention, system)}"


# ----------------------------------------------------------------------------- shared
def operating_range(machine: Any) -> dict[str, float | None]:
    """N_min, N_mc and trip speed of a machine spec (or the findings' ``machine`` dict)."""
    get = machine.get if isinstance(machine, Mapping) else \
        (lambda k: getattr(machine, k, None))
    return {"min_operating_speed_rpm": get("min_operating_speed_rpm"),
            "max_continuous_speed_rpm": get("max_continuous_speed_rpm"),
            "trip_speed_rpm": get("trip_speed_rpm")}


def probe_kinds(findings: Mapping[str, Any] | None, kinds: Kinds | None = None) -> dict[str, str]:
    """Transducer kind per probe: the findings' ``probes`` table, else ``kinds``."""
    out = dict(kinds or {})
    for p in (findings or {}).get("probes") or []:
        if p.get("name") and p.get("kind"):
            out[p["name"]] = p["kind"]
    return out


def direction_label(a: str, b: str, joiner: str = " vs ") -> str:
    """One run direction, or the two compared ('run-up vs coast-down')."""
    return a if a == b else f"{a}{joiner}{b}"


def _criticals(findings) -> list[dict[str, Any]]:
    return list((findings or {}).get("criticals") or [])


_SIDE_REF = {"below": "N_min", "above": "N_mc"}


def _side(c: Mapping[str, Any]) -> str | None:
    return c.get("side") or c.get("margin_side")


def side_text(c: Mapping[str, Any]) -> str:
    """'below N_min (4,400 rpm)', 'above N_mc (…)', 'inside the operating range' or '–'."""
    side = _side(c)
    if side in _SIDE_REF:
        ref = c.get("reference_speed_rpm")
        return f"{side} {_SIDE_REF[side]}" + (f" ({number(ref)} rpm)" if ref is not None else "")
    if side == "inside":
        return "inside the operating range"
    return MISSING


def margin_text(c: Mapping[str, Any], key: str) -> str:
    """A margin in % with the side it is measured on ('20.5 % below')."""
    v = c.get(key)
    if v is None:
        return MISSING
    side = _side(c)
    return f"{number(v, 1, '%')} {side}" if side in _SIDE_REF else number(v, 1, "%")


def verdict_word(v: Any) -> str:
    """The verdict as it is said everywhere ('pass', 'fail', 'not judged', ...)."""
    return str(v) if v else MISSING


# ----------------------------------------------------------------------------- findings
def critical_rows(findings, system: str = "metric", *, kinds: Kinds | None = None
                  ) -> list[dict[str, str]]:
    """One row of cells per critical speed of the findings, in the findings' order."""
    k = probe_kinds(findings, kinds)
    rows = []
    for i, c in enumerate(_criticals(findings)):
        kind = k.get(c.get("probe"))
        af = c.get("af_governing")
        req = margin_text(c, "required_margin_pct")
        if req == MISSING and c.get("critically_damped"):
            req = "none (critically damped)"
        rows.append({
            "i": i, "probe": c.get("probe") or MISSING,
            "direction": c.get("direction") or MISSING,
            "speed": number(c.get("speed_rpm")), "basis": c.get("speed_basis") or MISSING,
            "peak": amplitude(c.get("peak_amplitude"), kind,
                              VECTOR_AMPLITUDE_CONVENTION.get(kind, ""), system,
                              fallback_units=c.get("amplitude_units") or ""),
            "af_half_power": number(c.get("af_half_power"), 2),
            "af_phase": number(c.get("af_phase"), 2), "af_fit": number(c.get("af_fit"), 2),
            "af": f"{number(af, 2)} ({c.get('af_method') or '?'})" if af is not None
            else MISSING,
            "classification": c.get("classification") or MISSING,
            "confidence": c.get("confidence") or MISSING,
            "side": side_text(c), "margin": margin_text(c, "separation_margin_pct"),
            "required": req, "verdict": verdict_word(c.get("margin_verdict")),
            "source": c.get("margin_reason") or "", "mode_hint": c.get("mode_hint") or "",
            "sweep_note": c.get("sweep_note") or "", **reading_cells(c)})
    return rows


_MEASURES = {"direct": "direct (unfiltered)", "1x": "1X", "1X": "1X"}
# judged verdicts, exceeding first; 'above alert' is a site alert level: said, not a failure
_JUDGED = {"exceeds": 0, "fail": 0, "above alert": 1, "within": 2, "pass": 2}


def _measure_text(lim: Mapping[str, Any]) -> str:
    """'direct (unfiltered)', '1X', or a velocity overall with its band
    ('overall 10–1000 Hz'): findings written before the band carry none, and their
    velocity overall was the rms as recorded."""
    band = lim.get("level_band")
    if lim.get("measure") == "direct" and band:
        return f"overall {str(band).replace('-', '–')}"
    return _MEASURES.get(lim.get("measure"), lim.get("measure") or MISSING)


def level_title(findings, probe: str) -> str:
    """What a probe's level is: 'Direct (unfiltered) level', or for a velocity probe
    whose overall is band-limited 'Overall level (10–1000 Hz)'.

    >>> level_title({"probes": [{"name": "DE-VEL", "level_band": "10-1000 Hz"}]}, "DE-VEL")
    'Overall level (10–1000 Hz)'
    """
    for p in (findings or {}).get("probes") or []:
        if p.get("name") == probe and p.get("level_band"):
            return f"Overall level ({str(p['level_band']).replace('-', '–')})"
    return "Direct (unfiltered) level"


def top_speed_note(findings) -> str | None:
    """Which speed the top-speed checks use and why, when the run went above N_mc (an
    overspeed trip test): the limits apply up to N_mc, so the check reads the highest
    speed up to it, and the speeds above are shown for reference only."""
    f = findings or {}
    n_mc = (f.get("machine") or {}).get("max_continuous_speed_rpm")
    above = [lim for lim in f.get("limits") or [] if lim.get("where") == "above N_mc"
             and lim.get("band_rpm")]
    tops = [lim for lim in f.get("limits") or [] if lim.get("where") == "top speed"
            and lim.get("band_rpm")]
    if not above or not tops or n_mc is None:
        return None
    reached = max(float(lim["band_rpm"][1]) for lim in above)
    used = max(float(lim["band_rpm"][1]) for lim in tops)
    return (f"the run reached {number(reached)} rpm; the top-speed checks use "
            f"{number(used)} rpm, the highest speed up to the maximum continuous speed "
            f"N_mc {number(n_mc)} rpm, because the limits apply within the operating range; "
            "the speeds above N_mc are shown for reference only")


def limit_rows(findings, system: str = "metric", *, kinds: Kinds | None = None
               ) -> list[dict[str, Any]]:
    """Rows of the limit checks, judged rows first (exceeds before within), then the
    reference-only rows, each group in the findings' order. Levels and limits are in the
    probe's level convention (p-p displacement, rms seismic), as the checks compare them.
    Each row's ``where_note`` says which speed a top-speed check uses and why when the run
    went above N_mc (:func:`top_speed_note`)."""
    k = probe_kinds(findings, kinds)
    note = top_speed_note(findings)
    rows = []
    for lim in (findings or {}).get("limits") or []:
        kind = k.get(lim.get("probe"))
        conv = LEVEL_CONVENTION.get(kind, "")
        units = lim.get("units") or ""
        limit = lim.get("limit")
        verdict = lim.get("verdict") or MISSING
        rows.append({
            "probe": lim.get("probe") or MISSING, "direction": lim.get("direction") or MISSING,
            "measure": _measure_text(lim),
            "where": lim.get("where") or MISSING, "speed": number(lim.get("speed_rpm")),
            "value": amplitude(lim.get("value"), kind, conv, system, fallback_units=units),
            "limit": amplitude(limit, kind, conv, system, fallback_units=units)
            if _finite(limit) else (limit or MISSING),
            "zone": lim.get("zone") or MISSING, "verdict": verdict,
            "basis": lim.get("basis") or MISSING, "source": lim.get("source") or "",
            "judged": verdict in _JUDGED, "exceeds": _JUDGED.get(verdict) == 0,
            "alert": verdict == "above alert",
            "where_note": note if lim.get("where") == "top speed" else None})
    return sorted(rows, key=lambda r: _JUDGED.get(r["verdict"], 3))


def direction_rows(findings) -> list[dict[str, str]]:
    """Run-up against coast-down, one row per probe and critical pair."""
    return [{"probe": d.get("probe") or MISSING, "up": number(d.get("run_up_speed_rpm")),
             "down": number(d.get("coast_down_speed_rpm")),
             "diff": number(d.get("speed_difference_pct"), 1, "%"),
             "af": number(d.get("af_difference"), 2), "agreement": d.get("agreement") or MISSING,
             "note": d.get("note") or ""} for d in (findings or {}).get("directions") or []]


_SPLIT = "; possible split critical with the other probe's "
_CRIT_AT = re.compile(r"^critical at [\d.,]+ rpm ")
_SPLIT_PCT = re.compile(r"\(([+-]?\d+(?:\.\d+)?) %\)")


def bearing_lines(findings) -> list[str]:
    """Agreement of the X and Y probes of each bearing, one sentence each; a possible
    split critical (a critical seen by X only beside one seen by Y only) is said once per
    pair, not once from each side."""
    out: list[str] = []
    split: dict[tuple, list[tuple[dict, str, str]]] = {}
    for b in (findings or {}).get("bearings") or []:
        note = b.get("note") or ""
        if _SPLIT in note:
            base, _, rest = note.partition(_SPLIT)
            key = (b.get("bearing"), b.get("direction"))
            if key not in split:
                out.append(key)  # placeholder: the pair's line goes where its first side was
            split.setdefault(key, []).append((b, base, rest))
            continue
        out.append(f"{b.get('bearing', '?')} {b.get('direction', '')}: "
                   f"{number(b.get('speed_rpm'))} rpm, {b.get('agreement', MISSING)}"
                   + (f" ({note})" if note else ""))
    lines = []
    for item in out:
        if not isinstance(item, tuple):
            lines.append(item)
            continue
        sides = split[item]
        pct = _SPLIT_PCT.search(sides[0][2])
        seen = " and ".join(f"{number(b.get('speed_rpm'))} rpm "
                            + _CRIT_AT.sub("", base).strip() for b, base, _ in sides)
        lines.append(f"{item[0] or '?'} {item[1] or ''}: possible split critical, {seen}"
                     + (f", {pct.group(1)} % apart" if pct else "")
                     + " (e.g. anisotropic supports)")
    return lines


#: Notes that stand with every run of a kind (not warnings about this run's data): shown
#: as notes, not styled as warnings.
STANDING_PREFIXES = ("values marked 'reference only'",
                     "zone and limit values marked 'reference only'")


def split_standing(lines: Sequence[str]) -> tuple[list[str], list[str]]:
    """(warnings, standing notes) of the findings' warning lines."""
    warn = [w for w in lines if not str(w).startswith(STANDING_PREFIXES)]
    return warn, [w for w in lines if str(w).startswith(STANDING_PREFIXES)]


def rising_lines(findings) -> list[tuple[str, str]]:
    """(probe and direction, what rises) of each response still rising at the top speed."""
    out = []
    for r in (findings or {}).get("rising_at_top") or []:
        text = r.get("note") or (
            f"1X rises {number(r.get('rise_pct'), 0, '%')} from {number(r.get('from_rpm'))} "
            f"to {number(r.get('to_rpm'))} rpm (lag change "
            f"{number(r.get('lag_change_deg'), 0, '°')})")
        out.append((f"{r.get('probe', '?')} {r.get('direction', '')}", text))
    return out


def warnings_of(findings, extra: Sequence[str] = ()) -> list[str]:
    """The findings' warnings and ``extra`` ones, each once, leaving out what the
    rising-at-top lines already say."""
    f = findings or {}
    shown = [str(r.get("note")) for r in f.get("rising_at_top") or [] if r.get("note")]
    return [w for w in dict.fromkeys(str(w) for w in list(f.get("warnings") or []) + list(extra))
            if not any(n and w.endswith(n) for n in shown)]


def summary_line(findings) -> str:
    """How much was judged, in one sentence."""
    f = findings or {}
    crit = _criticals(f)
    mv = [c.get("margin_verdict") for c in crit]
    lims = limit_rows(f)
    judged = [r for r in lims if r["judged"]]
    parts = [f"{len(crit)} critical speed{'s' if len(crit) != 1 else ''}: "
             f"{mv.count('pass')} margin pass, {mv.count('fail')} fail, "
             f"{len(mv) - mv.count('pass') - mv.count('fail')} not judged",
             f"{len(judged)} limit checks judged: {sum(r['exceeds'] for r in judged)} exceed, "
             f"{sum(not r['exceeds'] and not r['alert'] for r in judged)} within"
             + (f", {sum(r['alert'] for r in judged)} above a site alert level"
                if any(r['alert'] for r in judged) else ""),
             f"{len(lims) - len(judged)} reference only"]
    rising = f.get("rising_at_top") or []
    if rising:
        parts.append(f"{len(rising)} response{'s' if len(rising) != 1 else ''} still rising "
                     "at the top speed (not judged)")
    return "; ".join(parts) + "."


def verdict_reasons(findings, system: str = "metric", *, kinds: Kinds | None = None
                    ) -> list[str]:
    """Plain sentences saying what makes the run verdict: failed margins and exceeded
    limits."""
    out = []
    for c in _criticals(findings):
        if c.get("margin_verdict") == "fail":
            out.append(f"{c.get('probe')} {c.get('direction', '')}: critical at "
                       f"{number(c.get('speed_rpm'))} rpm, {side_text(c)}: margin "
                       f"{margin_text(c, 'separation_margin_pct')} found, "
                       f"{margin_text(c, 'required_margin_pct')} required.")
    for r in limit_rows(findings, system, kinds=kinds):
        if r["exceeds"]:
            out.append(f"{r['probe']} {r['direction']}: {r['measure']} at {r['where']} "
                       f"({r['speed']} rpm) is {r['value']}, above the limit {r['limit']} "
                       f"({r['basis']})."
                       + (f" Speed used: {r['where_note']}." if r.get("where_note") else ""))
    return out


EVIDENCE_FIELDS = [
    ("speed_rpm", "critical speed", "rpm", 0), ("speed_basis", "speed taken from", "", None),
    ("peak_speed_rpm", "amplitude peak at", "rpm", 0),
    ("quadrature_speed_rpm", "90° phase shift at", "rpm", 0),
    ("band_rpm", "band searched", "rpm", None), ("phase_change_deg", "phase change", "°", 0),
    ("lag_at_peak_deg", "lag at peak", "°", 0), ("af_half_power", "AF half-power", "", 2),
    ("n1_rpm", "N1 (0.707 × peak)", "rpm", 0), ("n2_rpm", "N2 (0.707 × peak)", "rpm", 0),
    ("af_phase", "AF phase slope", "", 2), ("af_fit", "AF modal fit", "", 2),
    ("damping_ratio_fit", "damping ratio (fit)", "", 3),
    ("af_governing", "AF governing", "", 2), ("af_method", "AF method", "", None),
    ("governing", "reading that governs", "", None),
    ("governing_reason", "why it governs", "", None),
    ("classification", "classification", "", None), ("mode_hint", "mode hint", "", None),
    ("sweep_rate_rpm_s", "sweep rate", "rpm/s", 0), ("sweep_note", "sweep", "", None),
    ("separation_margin_pct", "margin found", "%", 1),
    ("required_margin_pct", "margin required", "%", 1),
    ("side", "side of operating range", "", None),
    ("reference_speed_rpm", "margin measured from", "rpm", 0),
    ("margin_verdict", "margin verdict", "", None), ("margin_reason", "why", "", None),
    ("confidence", "confidence", "", None), ("profile", "profile", "", None)]


def evidence_rows(findings, index: int, system: str = "metric", *,
                  kinds: Kinds | None = None) -> list[tuple[str, str]]:
    """(label, value) of every number behind one critical, the peak amplitude fourth."""
    crit = _criticals(findings)
    c = crit[index]
    rows = []
    for key, label, unit, digits in EVIDENCE_FIELDS:
        v = c.get(key)
        if v is None:
            continue
        if isinstance(v, (list, tuple)):
            txt = "–".join(number(x) for x in v) + (f" {unit}" if unit else "")
        elif digits is not None and _finite(v):
            txt = number(v, digits, unit)
        else:
            txt = str(v)
        rows.append((label, txt))
    kind = probe_kinds(findings, kinds).get(c.get("probe"))
    rows.insert(3, ("peak amplitude", amplitude(
        c.get("peak_amplitude"), kind, VECTOR_AMPLITUDE_CONVENTION.get(kind, ""), system,
        fallback_units=c.get("amplitude_units") or "")))
    return rows


# ----------------------------------------------------------------------------- comparison
def run_name(run: Mapping[str, Any]) -> str:
    """'run 3 (label; run-up, 2025 overhaul, 2025-04-02)' from a comparison's run entry."""
    return (f"run {run['id']} ({run.get('label') or run.get('source')}; {run.get('kind')}, "
            f"{run.get('cycle') or 'no cycle'}, "
            f"{(run.get('started_at') or 'start not given')[:10]})")


def _significance(shift) -> str:
    if not shift or shift.get("significant") is None:
        return "not judged"
    if not shift["significant"]:
        return "not significant"
    if shift.get("flagged", True):
        return "significant"
    units = shift.get("units") or ""
    return (f"within the engineering floor ({number(shift.get('floor'), 2, units)}): "
            "not counted")


def _pair_speeds(a, b) -> str:
    return f"{number(a.get('speed_rpm')) if a else 'none'} → " \
           f"{number(b.get('speed_rpm')) if b else 'none'}"


def shift_rows(comparison: Mapping[str, Any], probe: str | None = None
               ) -> list[dict[str, Any]]:
    """One row per matched critical of each run pair (of ``probe``, or every probe):
    the critical speed, AF and peak 1X of both runs and the shifts with their sigmas."""
    rows = []
    for p in comparison.get("pairs") or []:
        for pr in p["probes"]:
            if probe is not None and pr["probe"] != probe:
                continue
            d = direction_label(pr["direction_a"], pr["direction_b"])
            kind = pr.get("kind")
            conv = VECTOR_AMPLITUDE_CONVENTION.get(kind, "")
            for m in pr["criticals"]:
                sp, af, pk = m.get("speed") or {}, m.get("af") or {}, m.get("peak_amplitude") or {}
                a, b = m.get("a") or {}, m.get("b") or {}
                pct = sp.get("delta_pct")
                rows.append({
                    "runs": f"{p['a']} → {p['b']}", "probe": pr["probe"], "direction": d,
                    "speeds": _pair_speeds(m.get("a"), m.get("b")),
                    "speed_a": plus_minus(a.get("speed_rpm"), a.get("speed_std_rpm"), 1),
                    "speed_b": plus_minus(b.get("speed_rpm"), b.get("speed_std_rpm"), 1),
                    "speed_shift": plus_minus(sp.get("delta"), sp.get("sigma"), 1, "rpm",
                                              sign=True)
                    + (f" ({pct:+.1f} %)" if _finite(pct) else ""),
                    "speed_sig": _significance(m.get("speed")),
                    "af_a": plus_minus(a.get("af"), a.get("af_std"), 2),
                    "af_b": plus_minus(b.get("af"), b.get("af_std"), 2),
                    "afs": f"{number(a.get('af'), 2)} → {number(b.get('af'), 2)}",
                    "af_shift": plus_minus(af.get("delta"), af.get("sigma"), 2, sign=True),
                    "af_sig": _significance(m.get("af")),
                    "peaks": f"{amplitude(a.get('peak_amplitude'), kind, conv)} → "
                             f"{amplitude(b.get('peak_amplitude'), kind, conv)}"
                    if kind else f"{number(a.get('peak_amplitude'), 1)} → "
                                 f"{number(b.get('peak_amplitude'), 1)} {pr.get('units', '')}",
                    "peak_shift": plus_minus(pk.get("delta"), pk.get("sigma"), 2,
                                             (pk.get("units") or pr.get("units") or "")
                                             .replace("um", "µm"), sign=True),
                    "peak_sig": _significance(m.get("peak_amplitude")),
                    "hints": "; ".join(m.get("hints") or []) or MISSING,
                    "notes": "; ".join(list(m.get("notes") or []) + list(pr.get("notes") or [])),
                    "changed": "changed" if m.get("changed") else "no significant change"})
    return rows


def phase_rows(pair: Mapping[str, Any]) -> list[dict[str, Any]]:
    """Lag and 1X compared at the chosen speeds, one row per probe and quantity."""
    rows = []
    for pr in pair.get("probes") or []:
        for s in pr.get("phase") or []:
            if not s or s.get("delta") is None:
                continue
            unit = s.get("units") or ""
            rows.append({"probe": pr["probe"], "quantity": s.get("quantity") or MISSING,
                         "a": number(s.get("a"), 2, unit), "b": number(s.get("b"), 2, unit),
                         "change": plus_minus(s.get("delta"), s.get("sigma"), 2, unit,
                                              sign=True),
                         "significant": _significance(s)})
    return rows


def slow_roll_rows(pair: Mapping[str, Any]) -> list[dict[str, Any]]:
    """The slow-roll vectors (runout, bow) of both runs and their change."""
    out = []
    for s in pair.get("slow_roll") or []:
        units = s.get("units") or ""

        def vec(amp, lag):
            return f"{number(amp, 2)} {units} at lag {number(lag)}°"
        out.append({"probe": s["probe"], "a": vec(s.get("a_amplitude"), s.get("a_lag_deg")),
                    "b": vec(s.get("b_amplitude"), s.get("b_lag_deg")),
                    "change": plus_minus(s.get("change"), s.get("sigma"), 2, units, sign=True),
                    "material": "yes" if s.get("material") else "no",
                    "hint": s.get("hint") or ""})
    return out


def pair_notes(pair: Mapping[str, Any]) -> list[str]:
    """Notes of a run pair's probes and matched criticals, 'probe: note'."""
    return [f"{pr['probe']}: {n}" for pr in pair.get("probes") or [] for n in pr.get("notes") or []] + \
        [f"{pr['probe']}: {n}" for pr in pair.get("probes") or [] for m in pr.get("criticals") or []
         for n in m.get("notes") or []]


# the run's modal model (sweep-free readings): rundash.presentation.modal
from rundash.presentation.modal import (  # noqa: E402  (uses the helpers above)
    GOVERNS_MARK, bearing_mode_lines, modal_model_lines, model_curves, reading_cells,
)
