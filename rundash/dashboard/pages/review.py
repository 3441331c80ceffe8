"""Run review: opens on the verdict (criticals, margins found versus required, limit
checks, confidence, the caution), then the plots behind it.

Callbacks are thin: they decode the controls, call one of the ``*_figures`` /
``*_figure`` functions of this module (which read stored results, never recompute order
tracking) and return figures. Tests call those functions directly.
"""

from __future__ import annotations

import math
import re
from typing import Any

import numpy as np

from rundash import CAUTION, figures
from rundash.dashboard import ids, reports
from rundash.errors import NotFoundError, RundashError

PATH = "/run/"
TITLE = "Run review"
_ROUTE = re.compile(r"^/run/(\d+)/?$")
UNIT_SYSTEMS = ("metric", "imperial")
PHASE_DISPLAYS = ("unwrapped", "wrapped")


def match(pathname: str):
    m = _ROUTE.match(pathname or "")
    return {"run_id": int(m.group(1))} if m else None


# ----------------------------------------------------------------------------- reading
def _cache(db, cache):
    """The app's cache, or an uncached reader (tests and scripts call without one)."""
    from rundash.dashboard.cache import ResultCache

    return cache if cache is not None else ResultCache(db, maxsize=0)


def load_context(db, run_id: int, *, cache=None) -> dict[str, Any]:
    """Everything the page header and verdict need: run, machine, processing, channels,
    probes, findings and the cache key of the run's processing."""
    return _cache(db, cache).context(run_id)


def operating_of(machine) -> dict[str, float | None]:
    s = machine.spec
    return {"min_operating_speed_rpm": s.min_operating_speed_rpm,
            "max_continuous_speed_rpm": s.max_continuous_speed_rpm,
            "trip_speed_rpm": s.trip_speed_rpm}


def _criticals(findings, probe: str | None = None) -> list[dict[str, Any]]:
    cs = list((findings or {}).get("criticals") or [])
    return [c for c in cs if probe is None or c.get("probe") == probe]


def vector_traces(db, run_id: int, probe: str, orders, compensated: bool, *, cache=None,
                  ctx=None) -> tuple[list[dict[str, Any]], str]:
    """Stored tracks of one probe, cut into run-direction pieces; and the probe's kind.

    Pieces follow :func:`rundash.figures.split_by_direction` (short segments drawn with
    their neighbour); the figures join the pieces of one direction into one trace.
    """
    src = _cache(db, cache)
    ctx = ctx or src.context(run_id)
    proc = ctx["processing"]
    segments = proc.segments if proc is not None else []
    kind = next((c.kind for c in ctx["channels"] if c.probe_name == probe), None)
    out = []
    for order in sorted({float(o) for o in orders} | {1.0}):
        tracks = src.tracks(ctx["key"], probe, order)
        if not tracks:
            continue
        kind = tracks[0].kind
        use_comp = bool(compensated) and any(t.compensated for t in tracks)
        t = next((t for t in tracks if t.compensated == use_comp), None)
        if t is None:
            continue
        for direction, idx in figures.split_by_direction(t.time_s, segments):
            out.append({"probe": probe, "order": order, "direction": direction,
                        "time_s": t.time_s[idx], "speed_rpm": t.speed_rpm[idx],
                        "amplitude": t.amplitude[idx], "phase_lag_deg": t.phase_lag_deg[idx],
                        "direct": t.direct[idx], "compensated": t.compensated})
    return out, kind or "proximity"


def _uirev(run_id, system, extra=""):
    return f"run-{run_id}-{system}{extra}"


def _vector_setup(db, run_id, probe, orders, compensation, system, cache):
    src = _cache(db, cache)
    ctx = src.context(run_id)
    traces, kind = vector_traces(db, run_id, probe, orders, compensation == "compensated",
                                 cache=src, ctx=ctx)
    has_comp = any(t.get("compensated") for t in traces)
    spec = ctx["machine"].spec
    rpm_max = max([float(np.max(t["speed_rpm"])) for t in traces] or
                  [spec.max_continuous_speed_rpm])
    try:
        limits = src.guidance_lines(ctx["key"], spec.profile, kind=kind,
                                    max_continuous_speed_rpm=spec.max_continuous_speed_rpm,
                                    speed_range_rpm=(0.0, round(rpm_max, -1)))
    except RundashError:
        limits = []
    comp_word = "slow-roll compensated" if has_comp else "uncompensated"
    return ctx, traces, kind, comp_word, has_comp, limits


def bode_figure(db, run_id: int, probe: str, orders, compensation: str, system: str,
                phase: str = "unwrapped", *, cache=None):
    """The Bode plot of one probe (orders chosen, 1X always), phase unwrapped or wrapped."""
    ctx, traces, kind, comp_word, has_comp, limits = _vector_setup(
        db, run_id, probe, orders, compensation, system, cache)
    return figures.bode(traces, kind=kind, system=system, criticals=_criticals(
        ctx["findings"], probe), operating=operating_of(ctx["machine"]), limit_lines=limits,
        compensated=has_comp, phase=phase if phase in PHASE_DISPLAYS else "unwrapped",
        uirevision=_uirev(run_id, system), title=f"Bode plot, {probe} ({comp_word})")


def polar_direct_figures(db, run_id: int, probe: str, compensation: str, system: str, *,
                         cache=None):
    """The polar plot (1X) and the direct-versus-1X plot of one probe."""
    ctx, traces, kind, comp_word, _, limits = _vector_setup(
        db, run_id, probe, [1.0], compensation, system, cache)
    spec = ctx["machine"].spec
    crit = _criticals(ctx["findings"], probe)
    uirev = _uirev(run_id, system)
    polar = figures.polar(traces, kind=kind, system=system, rotation=spec.rotation,
                          criticals=crit, uirevision=uirev,
                          title=f"Polar plot, {probe} 1X ({comp_word})")
    direct = figures.direct_vs_filtered(
        traces, kind=kind, system=system, limit_lines=limits,
        operating=operating_of(ctx["machine"]), uirevision=uirev,
        title=f"Direct (unfiltered) level beside 1X, {probe}")
    return polar, direct


def vector_figures(db, run_id: int, probe: str, orders, compensation: str, system: str,
                   phase: str = "unwrapped", *, cache=None):
    """Bode, polar and direct-versus-1X figures for one probe."""
    src = _cache(db, cache)
    if cache is None:  # one call reads each track once
        from rundash.dashboard.cache import ResultCache

        src = ResultCache(db, maxsize=16)
    bode = bode_figure(db, run_id, probe, orders, compensation, system, phase, cache=src)
    polar, direct = polar_direct_figures(db, run_id, probe, compensation, system, cache=src)
    return bode, polar, direct


def speed_figure(db, run_id: int, probe: str | None = None, *, cache=None):
    """Speed versus time with the critical bands of ``probe`` (all probes when None)."""
    src = _cache(db, cache)
    ctx = src.context(run_id)
    prof = src.speed_profile(ctx["key"])
    t, n = prof if prof is not None else (np.zeros(0), np.zeros(0))
    crit = _criticals(ctx["findings"], probe)
    return figures.speed_time(t, n, criticals=crit, operating=operating_of(ctx["machine"]),
                              uirevision=f"run-{run_id}")


def cascade_figure(db, run_id: int, probe: str, system: str, *, cache=None):
    src = _cache(db, cache)
    ctx = src.context(run_id)
    c = src.cascade(ctx["key"], probe)
    if c is None:
        return _empty(f"No cascade stored for {probe}")
    proc = ctx["processing"]
    kind = next((ch.kind for ch in ctx["channels"] if ch.probe_name == probe), "proximity")
    orders = tuple((proc.params or {}).get("orders") or (1, 2, 3, 4)) if proc else (1, 2, 3, 4)
    return figures.cascade(c.speed_rpm, c.freq_hz, c.amplitude, kind=kind, system=system,
                           orders=orders, probe=probe, uirevision=_uirev(run_id, system, probe),
                           title=f"Cascade of spectra versus speed, {probe}")


def parse_frequencies(text: str | None) -> tuple[list[float], str]:
    """Natural frequencies in Hz from free text ('41.5, 96'); and a note on what was dropped."""
    if not text or not text.strip():
        return [], ""
    out, bad = [], []
    for part in re.split(r"[,;\s]+", text.strip()):
        if not part:
            continue
        try:
            v = float(part)
        except ValueError:
            bad.append(part)
            continue
        if math.isfinite(v) and v > 0:
            out.append(v)
        else:
            bad.append(part)
    note = (f"Ignored {', '.join(repr(b) for b in bad)}: enter positive numbers in Hz, "
            "separated by commas." if bad else "")
    return out, note


def campbell_figure(db, run_id: int, natural_text: str | None, *, cache=None):
    src = _cache(db, cache)
    ctx = src.context(run_id)
    prof = src.speed_profile(ctx["key"])
    top = float(np.max(prof[1])) if prof is not None and prof[1].size else \
        ctx["machine"].spec.max_continuous_speed_rpm
    proc = ctx["processing"]
    orders = tuple((proc.params or {}).get("orders") or (1, 2, 3, 4)) if proc else (1, 2, 3, 4)
    freqs, note = parse_frequencies(natural_text)
    fig = figures.campbell(max(top, ctx["machine"].spec.trip_speed_rpm or 0.0), orders=orders,
                           criticals=_criticals(ctx["findings"]), natural_frequencies_hz=freqs,
                           operating=operating_of(ctx["machine"]), uirevision=f"run-{run_id}")
    return fig, note


def orbit_pairs(probes) -> list[tuple[str, str]]:
    """(X probe, Y probe) pairs named by the machine description, X first."""
    names = {p.name: p for p in probes}
    pairs = []
    for p in probes:
        if p.pair and p.pair in names and p.axis == "X":
            pairs.append((p.name, p.pair))
    for p in probes:  # pairs whose axes are not marked X/Y
        if p.pair and p.pair in names and p.axis not in ("X", "Y") and \
                (p.pair, p.name) not in pairs and (p.name, p.pair) not in pairs:
            pairs.append((p.name, p.pair))
    return pairs


def orbit_figure(db, run_id: int, pair: str | None, speed_rpm, direction: str | None,
                 system: str, *, cache=None):
    """Orbit of an X/Y pair at the revolution nearest the chosen speed (and direction).

    The filtered orbit uses the uncompensated 1X vectors of that revolution, the unfiltered
    one the raw samples between its two once-per-rev events (mean removed); probe
    mounting angles are applied by :func:`rundash.figures.orbit`.
    """
    from rundash.storage import queries as q

    src = _cache(db, cache)
    ctx = src.context(run_id)
    pairs = orbit_pairs(ctx["probes"])
    if not pairs:
        return _empty("No X/Y probe pair in this machine's description"), \
            "The machine description names no probe pairs."
    xname, yname = next((p for p in pairs if "|".join(p) == pair), pairs[0])
    probes = {p.name: p for p in ctx["probes"]}
    chans = {c.probe_name: c for c in ctx["channels"] if c.role == "probe"}
    key = ctx["key"]
    opr = src.tach(key) if ctx["processing"] is not None else None
    tx = [t for t in src.tracks(key, xname, 1.0) if not t.compensated]
    ty = [t for t in src.tracks(key, yname, 1.0) if not t.compensated]
    if opr is None or not tx or not ty or opr.size < 2:
        return _empty("Run not processed: no orbit"), "Process the run first."
    tx, ty = tx[0], ty[0]
    proc = ctx["processing"]
    segs = proc.segments if proc else []
    candidates = np.arange(tx.time_s.size)
    if direction and direction != "any":
        pieces = [idx for d, idx in figures.split_by_direction(tx.time_s, segs)
                  if d == direction]
        if pieces:
            candidates = np.concatenate(pieces)
    target = float(speed_rpm) if speed_rpm not in (None, "") else \
        float(ctx["machine"].spec.max_continuous_speed_rpm)
    i = int(candidates[np.argmin(np.abs(tx.speed_rpm[candidates] - target))])
    t_mid = float(tx.time_s[i])
    k = int(np.clip(np.searchsorted(opr, t_mid) - 1, 0, opr.size - 2))
    cx, cy = chans[xname], chans[yname]
    fs = cx.sample_rate_hz
    i0, i1 = int(round(opr[k] * fs)), int(round(opr[k + 1] * fs))
    with db.read() as conn:
        raw_x = q.read_channel(conn, cx.id, i0, i1 + 1)
        raw_y = q.read_channel(conn, cy.id, i0, i1 + 1)
    px, py = probes[xname], probes[yname]
    fig = figures.orbit(
        {"name": xname, "angle_deg": px.angle_deg, "amplitude": tx.amplitude[i],
         "phase_lag_deg": tx.phase_lag_deg[i]},
        {"name": yname, "angle_deg": py.angle_deg, "amplitude": ty.amplitude[i],
         "phase_lag_deg": ty.phase_lag_deg[i]},
        kind=cx.kind or "proximity", system=system, rotation=ctx["machine"].spec.rotation,
        speed_rpm=float(tx.speed_rpm[i]), raw_x=raw_x, raw_y=raw_y)
    note = (f"Revolution {k + 1} at t = {opr[k]:.2f}–{opr[k + 1]:.2f} s, "
            f"{tx.speed_rpm[i]:.0f} rpm (nearest to {target:.0f} rpm); mounting angles "
            f"{xname} {px.angle_deg:g}°, {yname} {py.angle_deg:g}° applied; filtered 1X "
            "uncompensated.")
    return fig, note


def _empty(message: str):
    import plotly.graph_objects as go

    fig = go.Figure()
    fig.update_layout(template="simple_white", height=300,
                      annotations=[{"text": message, "showarrow": False, "xref": "paper",
                                    "yref": "paper", "x": 0.5, "y": 0.5, "font": {"size": 14}}],
                      xaxis={"visible": False}, yaxis={"visible": False})
    return fig


# ----------------------------------------------------------------------------- verdict
def _num(x, digits=0, unit=""):
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "–"
    if isinstance(x, (int, float)):
        return f"{x:,.{digits}f}{(' ' + unit) if unit else ''}"
    return str(x)


_UNIT_KINDS = {"um": "proximity", "µm": "proximity", "μm": "proximity", "mm/s": "velocity",
               "m/s2": "acceleration", "m/s²": "acceleration"}


def _amp(value, units: str | None, system: str) -> str:
    """An amplitude stated by the findings (storage units, e.g. 'um pp' or 'µm pp'), in
    the chosen unit system, with its unit and pp/pk/rms."""
    from rundash.units import display_unit, to_display

    if value is None:
        return "–"
    base = (units or "").split(" ")[0]
    tail = " ".join((units or "").split(" ")[1:])
    kind = _UNIT_KINDS.get(base)
    if kind is None:
        return _num(value, 2, units or "")
    v = float(to_display(float(value), kind, system))
    return f"{v:.3g} {display_unit(kind, system).replace('um', 'µm')} {tail}".strip()


_SIDE_REF = {"below": "N_min", "above": "N_mc"}


def _side_text(c) -> str:
    """'below N_min (4,400 rpm)', 'above N_mc (…)', 'inside the range' or '–'."""
    side = c.get("side") or c.get("margin_side")
    if side in _SIDE_REF:
        ref = c.get("reference_speed_rpm")
        return f"{side} {_SIDE_REF[side]}" + (f" ({_num(ref)} rpm)" if ref is not None else "")
    if side == "inside":
        return "inside the operating range"
    return "–"


def _pct_of(c, key) -> str:
    """A margin in % with the side it is measured on ('23.3 % below')."""
    v = c.get(key)
    side = c.get("side") or c.get("margin_side")
    if v is None:
        return "–"
    return f"{_num(v, 1, '%')} {side}" if side in _SIDE_REF else _num(v, 1, "%")


def critical_rows(findings, system: str = "metric") -> list[dict[str, str]]:
    """Rows of the criticals table (strings, display units)."""
    rows = []
    for i, c in enumerate(_criticals(findings)):
        af = c.get("af_governing")
        req = _pct_of(c, "required_margin_pct")
        if req == "–" and c.get("critically_damped"):
            req = "none (critically damped)"
        rows.append({
            "i": i, "probe": c.get("probe") or "–", "direction": c.get("direction") or "–",
            "speed": _num(c.get("speed_rpm")), "basis": c.get("speed_basis") or "–",
            "peak": _amp(c.get("peak_amplitude"), c.get("amplitude_units"), system),
            "af": f"{af:.1f} ({c.get('af_method') or '?'})" if af is not None else "–",
            "side": _side_text(c),
            "margin": _pct_of(c, "separation_margin_pct"), "required": req,
            "verdict": c.get("margin_verdict") or "–",
            "confidence": c.get("confidence") or "–",
            "source": c.get("margin_reason") or ""})
    return rows


CRITICAL_COLUMNS = [("probe", "Probe"), ("direction", "Direction"), ("speed", "Speed (rpm)"),
                    ("basis", "Speed from"), ("peak", "Peak 1X"), ("af", "AF (method)"),
                    ("side", "Side (margin from)"), ("margin", "Margin found (% of N)"),
                    ("required", "Required (% of N)"), ("verdict", "Margin verdict"),
                    ("confidence", "Confidence")]
LIMIT_COLUMNS = [("probe", "Probe"), ("direction", "Direction"), ("measure", "Measure"),
                 ("where", "Where"), ("speed", "Speed (rpm)"), ("value", "Level"),
                 ("limit", "Limit"), ("zone", "Zone"), ("verdict", "Verdict"),
                 ("basis", "Basis")]
_MEASURES = {"direct": "direct (unfiltered)", "1x": "1X", "1X": "1X"}
_JUDGED = {"exceeds": 0, "fail": 0, "within": 1, "pass": 1}


def limit_rows(findings, system: str = "metric") -> list[dict[str, str]]:
    """Rows of the limit checks, judged rows first (exceeds before within), then the
    reference-only rows, each group in the findings' order."""
    rows = []
    for lim in (findings or {}).get("limits") or []:
        limit = lim.get("limit")
        limit_txt = _amp(limit, lim.get("units"), system) if isinstance(limit, (int, float)) \
            else (limit or "–")
        verdict = lim.get("verdict") or "–"
        rows.append({"probe": lim.get("probe") or "–", "direction": lim.get("direction") or "–",
                     "measure": _MEASURES.get(lim.get("measure"), lim.get("measure") or "–"),
                     "where": lim.get("where") or "–", "speed": _num(lim.get("speed_rpm")),
                     "value": _amp(lim.get("value"), lim.get("units"), system),
                     "limit": limit_txt, "zone": lim.get("zone") or "–",
                     "verdict": verdict, "basis": lim.get("basis") or "–",
                     "source": lim.get("source") or "",
                     "judged": verdict in _JUDGED, "exceeds": _JUDGED.get(verdict) == 0})
    return sorted(rows, key=lambda r: _JUDGED.get(r["verdict"], 2))


CRITICAL_ROW = "review-critical-row"  # pattern-matching id type of the criticals rows


def _table(columns, rows, table_id=None, *, clickable: bool = False):
    """A plain table; verdict cells carry their word and a class; rows of the criticals
    table are clickable (pattern-matching ids ``{'type': CRITICAL_ROW, 'index': i}``);
    rows whose check exceeds its limit or whose margin fails carry ``row-fail``."""
    from dash import html

    head = html.Thead(html.Tr([html.Th(n) for _, n in columns]))
    body = []
    for i, r in enumerate(rows):
        cells = [html.Td(r.get(k, "–"),
                         title=r.get("source") or None if k in ("basis", "verdict") else None,
                         className=f"v-{str(r.get(k)).replace(' ', '-')}" if k == "verdict"
                         else None)
                 for k, _ in columns]
        failing = r.get("exceeds") or r.get("verdict") == "fail"
        kw: dict[str, Any] = {"id": {"type": CRITICAL_ROW, "index": i}, "n_clicks": 0} \
            if clickable else {}
        cls = " ".join(c for c in ("clickable" if clickable else "",
                                   "row-fail" if failing else "") if c)
        if cls:
            kw["className"] = cls
        body.append(html.Tr(cells, **kw))
    kw = {"id": table_id} if table_id is not None else {}
    return html.Table([head, html.Tbody(body)], className="plain", **kw)


def verdict_reasons(findings, system: str = "metric") -> list[str]:
    """Plain sentences saying what makes the run verdict: failed margins, exceeded limits,
    and how much was judged at all."""
    f = findings or {}
    crit = _criticals(f)
    out = []
    for c in crit:
        if c.get("margin_verdict") == "fail":
            out.append(f"{c.get('probe')} {c.get('direction', '')}: critical at "
                       f"{_num(c.get('speed_rpm'))} rpm, {_side_text(c)}: margin "
                       f"{_pct_of(c, 'separation_margin_pct')} found, "
                       f"{_pct_of(c, 'required_margin_pct')} required.")
    for r in limit_rows(f, system):
        if r["exceeds"]:
            out.append(f"{r['probe']} {r['direction']}: {r['measure']} at {r['where']} "
                       f"({r['speed']} rpm) is {r['value']}, above the limit {r['limit']} "
                       f"({r['basis']}).")
    return out


def _summary_line(findings) -> str:
    f = findings or {}
    crit = _criticals(f)
    mv = [c.get("margin_verdict") for c in crit]
    lims = limit_rows(f)
    judged = [r for r in lims if r["judged"]]
    parts = [f"{len(crit)} critical speed{'s' if len(crit) != 1 else ''}: "
             f"{mv.count('pass')} margin pass, {mv.count('fail')} fail, "
             f"{len(mv) - mv.count('pass') - mv.count('fail')} not judged",
             f"{len(judged)} limit checks judged: {sum(r['exceeds'] for r in judged)} exceed, "
             f"{sum(not r['exceeds'] for r in judged)} within",
             f"{len(lims) - len(judged)} reference only"]
    rising = f.get("rising_at_top") or []
    if rising:
        parts.append(f"{len(rising)} response{'s' if len(rising) != 1 else ''} still rising "
                     "at the top speed (not judged)")
    return "; ".join(parts) + "."


def verdict_panel(ctx: dict[str, Any], system: str = "metric"):
    """The verdict section: what was found, against what, how sure, and the caution."""
    from dash import html

    from rundash.dashboard.pages.runs import verdict_badge

    f = ctx["findings"]
    proc = ctx["processing"]
    children = []
    if proc is None:
        children += [html.H2(["Verdict ", verdict_badge(None, False, big=True)]),
                     html.P("This run is not processed: no critical speeds or checks yet. "
                            "Process it (rundash process, or re-import it on the import page).")]
    elif f is None:
        children += [html.H2(["Verdict ", verdict_badge(None, True, big=True)]),
                     html.P("Processed (speed profile, vectors and cascades are stored), but "
                            "no findings yet: critical speeds, margins and limit checks "
                            "appear here once the run is processed by a rundash version that "
                            "judges them. The plots below show the stored vectors."),
                     html.Div(id=ids.EVIDENCE)]
    else:
        prof = f.get("profile") or {}
        children.append(html.H2(["Verdict ", verdict_badge(f.get("run_verdict"), True, big=True)]))
        children.append(html.P(_summary_line(f), id=ids.VERDICT_SUMMARY))
        reasons = verdict_reasons(f, system)
        if reasons:
            children.append(html.Div(className="reasons", id=ids.VERDICT_REASONS, children=[
                html.Strong("What fails:"), html.Ul([html.Li(r) for r in reasons])]))
        children.append(html.P([f"Guidance profile: {prof.get('title') or prof.get('name') or '–'}",
                                html.Span(" · needs your confirmation: the profile's values "
                                          "are of low confidence", className="warn")
                                if prof.get("needs_confirmation") else ""], className="muted"))
        crit = critical_rows(f, system)
        children.append(html.H3(f"Critical speeds found ({len(crit)})"))
        if crit:
            children.append(_table(CRITICAL_COLUMNS, crit, ids.CRITICALS_TABLE, clickable=True))
            children.append(html.P(
                "Margins are in % of N, the speed they are measured from: the minimum "
                "operating speed N_min for a critical below the operating range, the maximum "
                "continuous speed N_mc above it (the profile's rule). Peak 1X in the "
                "transducer's units (pp: peak-to-peak, pk: peak). Click a row (or a critical "
                "marker on the Bode plot) for the evidence behind it.", className="note"))
        else:
            children.append(html.P("No critical speed was found in the speed range of this "
                                   "run.", className="muted"))
        children.append(html.Div(id=ids.EVIDENCE))
        children += _rising_section(f)
        children += _directions_section(f)
        bearings = f.get("bearings") or []
        if bearings:
            children.append(html.H3("Agreement between probes of a bearing"))
            children.append(html.Ul([html.Li(
                f"{b.get('bearing', '?')} {b.get('direction', '')}: "
                f"{_num(b.get('speed_rpm'))} rpm, {b.get('agreement', '–')}"
                + (f" ({b['note']})" if b.get("note") else "")) for b in bearings]))
        children += _limits_section(f, system)
    shown = [str(r.get("note")) for r in (f or {}).get("rising_at_top") or [] if r.get("note")]
    warn = [w for w in dict.fromkeys(str(w) for w in list((f or {}).get("warnings") or [])
                                     + list(proc.warnings if proc else []))
            if not any(n and w.endswith(n) for n in shown)]  # said above already
    if warn:
        children.append(html.H3(f"Warnings ({len(warn)})"))
        children.append(html.Div(id=ids.WARNINGS, children=[
            html.Div(w, className="warn") for w in warn]))
    children.append(html.P((f or {}).get("caution") or CAUTION, className="note",
                           style={"fontStyle": "italic", "marginTop": "10px"}))
    return html.Div(children)


def _rising_section(f) -> list:
    from dash import html

    rising = f.get("rising_at_top") or []
    if not rising:
        return []
    items = []
    for r in rising:
        text = r.get("note") or (
            f"1X rises {_num(r.get('rise_pct'), 0, '%')} from {_num(r.get('from_rpm'))} to "
            f"{_num(r.get('to_rpm'))} rpm (lag change {_num(r.get('lag_change_deg'), 0, '°')})")
        items.append(html.Li([html.Strong(f"{r.get('probe', '?')} {r.get('direction', '')}: "),
                              text, " — a critical may lie above this run's top speed: "
                              "not located, not judged."]))
    return [html.H3(f"Response still rising at the top speed ({len(rising)})"),
            html.Div(className="attention", id=ids.RISING_AT_TOP, children=html.Ul(items))]


def _directions_section(f) -> list:
    from dash import html

    dirs = f.get("directions") or []
    if not dirs:
        return []
    cols = [("probe", "Probe"), ("up", "Run-up critical (rpm)"),
            ("down", "Coast-down critical (rpm)"), ("diff", "Speed difference"),
            ("af", "AF difference"), ("agreement", "Agreement"), ("note", "Note")]
    rows = [{"probe": d.get("probe") or "–", "up": _num(d.get("run_up_speed_rpm")),
             "down": _num(d.get("coast_down_speed_rpm")),
             "diff": _num(d.get("speed_difference_pct"), 1, "%"),
             "af": _num(d.get("af_difference"), 2), "agreement": d.get("agreement") or "–",
             "note": d.get("note") or ""} for d in dirs]
    return [html.H3(f"Run-up versus coast-down ({len(rows)})"),
            _table(cols, rows, ids.DIRECTIONS_TABLE)]


def _limits_section(f, system) -> list:
    from dash import html

    lims = limit_rows(f, system)
    judged = [r for r in lims if r["judged"]]
    ref = [r for r in lims if not r["judged"]]
    n_exc = sum(r["exceeds"] for r in judged)
    out = [html.H3(f"Vibration limit checks: {len(judged)} judged"
                   + (f", {n_exc} exceed" if n_exc else "")
                   + (f"; {len(ref)} for reference" if ref else ""))]
    if not lims:
        return out + [html.P("No limit applies to this run's probes.", className="muted")]
    if judged:
        out.append(_table(LIMIT_COLUMNS, judged, ids.LIMITS_TABLE))
    else:
        out.append(html.P("No limit check is judged for this run (all are for reference).",
                          className="muted", id=ids.LIMITS_TABLE))
    if ref:  # folded by the browser (a details element): no callback needed
        out.append(html.Details(id=ids.LIMITS_REFERENCE, className="reference", children=[
            html.Summary(f"{len(ref)} reference-only rows: zones and limits shown for "
                         "orientation (meant for steady operation or for the top speed), "
                         "not verdicts"),
            html.Div(_table(LIMIT_COLUMNS, ref), id=ids.LIMITS_REFERENCE_BODY)]))
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
    ("classification", "classification", "", None), ("mode_hint", "mode hint", "", None),
    ("sweep_rate_rpm_s", "sweep rate", "rpm/s", 0), ("sweep_note", "sweep", "", None),
    ("separation_margin_pct", "margin found", "%", 1),
    ("required_margin_pct", "margin required", "%", 1), ("side", "side of operating range", "", None),
    ("reference_speed_rpm", "margin measured from", "rpm", 0),
    ("margin_verdict", "margin verdict", "", None), ("margin_reason", "why", "", None),
    ("confidence", "confidence", "", None), ("profile", "profile", "", None)]


def evidence_panel(findings, index: int | None, system: str = "metric"):
    """The numbers behind one critical: speeds, AF estimates, margin, evidence lines."""
    from dash import html

    crit = _criticals(findings)
    if index is None or not (0 <= index < len(crit)):
        return ""
    c = crit[index]
    rows = []
    for key, label, unit, digits in EVIDENCE_FIELDS:
        v = c.get(key)
        if v is None:
            continue
        if isinstance(v, (list, tuple)):
            txt = "–".join(_num(x) for x in v) + (f" {unit}" if unit else "")
        elif digits is not None and isinstance(v, (int, float)):
            txt = _num(v, digits, unit)
        else:
            txt = str(v)
        rows.append(html.Tr([html.Th(label), html.Td(txt)]))
    rows.insert(3, html.Tr([html.Th("peak amplitude"),
                            html.Td(_amp(c.get("peak_amplitude"), c.get("amplitude_units"),
                                         system))]))
    ev = c.get("evidence") or []
    return html.Div(className="card", style={"borderColor": "#0072B2"}, children=[
        html.H3(f"Evidence: {c.get('probe', '?')} {c.get('direction', '')} critical at "
                f"{_num(c.get('speed_rpm'))} rpm"),
        html.Div(className="grid2eq", children=[
            html.Table(rows, className="plain"),
            html.Div([html.H4("Why rundash says so", style={"margin": "0 0 6px 0"}),
                      html.Ul([html.Li(str(e)) for e in ev]) if ev else
                      html.P("No evidence lines recorded.", className="muted")])])])


# ----------------------------------------------------------------------------- layout
def _radio(id_, options, value):
    from dash import dcc

    return dcc.RadioItems(id=id_, options=options, value=value, inline=True,
                          inputStyle={"marginRight": "4px"},
                          labelStyle={"marginRight": "12px"})


def _graph(id_, height):
    from dash import dcc

    return dcc.Graph(id=id_, style={"height": f"{height}px"},
                     config={"displaylogo": False, "toImageButtonOptions": {"format": "png"}})


def layout(db, run_id: int, *, cache=None):
    from dash import dcc, html

    try:
        ctx = load_context(db, run_id, cache=cache)
    except NotFoundError:
        return html.Div(className="card", children=[
            html.H2("Run not found"), html.P([f"There is no run {run_id}. ",
                                              dcc.Link("Back to the runs", href="/")])])
    run, m = ctx["run"], ctx["machine"]
    probes = ctx["probes"]
    proc = ctx["processing"]
    orders = [o for o in ((proc.params or {}).get("orders") if proc else [1.0]) or [1.0]]
    head = html.Div(className="card", children=[
        html.Div(dcc.Link("← machines and runs", href="/"), className="note"),
        html.H1(run.label or run.source_name, style={"fontSize": "22px", "margin": "4px 0"}),
        html.P(f"{m.spec.name} · {run.kind} · started "
               f"{run.started_at.strftime('%Y-%m-%d %H:%M UTC') if run.started_at else '–'} · "
               f"cycle {run.cycle or '–'} · {run.duration_s:.0f} s, {run.n_channels} channels "
               f"· file {run.source_name} · run {run.id}", className="muted"),
        html.P(f"Operating range {m.spec.min_operating_speed_rpm:,.0f}–"
               f"{m.spec.max_continuous_speed_rpm:,.0f} rpm"
               + (f", trip {m.spec.trip_speed_rpm:,.0f} rpm" if m.spec.trip_speed_rpm else "")
               + (f" · slow-roll window {proc.slow_roll_rpm[0]:.0f}–{proc.slow_roll_rpm[1]:.0f}"
                  " rpm" if proc and proc.slow_roll_rpm else ""), className="muted"),
        reports.run_actions(db, run, proc is not None)])
    verdict = html.Div(id=ids.VERDICT_PANEL, className="card",
                       children=verdict_panel(ctx, "metric"))
    if proc is None:
        return html.Div([dcc.Store(id=ids.RUN_ID, data=run_id), head, verdict])
    probe_opts = [{"label": p.name, "title": f"{p.kind}, bearing {p.bearing or '–'}, axis "
                   f"{p.axis}, mounted at {p.angle_deg:g}°", "value": p.name} for p in probes]
    crit = _criticals(ctx["findings"])
    first = crit[0]["probe"] if crit and any(p.name == crit[0]["probe"] for p in probes) \
        else probes[0].name
    pairs = orbit_pairs(probes)
    controls = html.Div(className="card controls", children=[
        html.Div([html.Label("Probe", className="head"),
                  _radio(ids.PROBE, probe_opts, first)]),
        html.Div([html.Label("Orders (1X always shown)", className="head"),
                  dcc.Checklist(id=ids.ORDERS, inline=True, value=[1.0],
                                options=[{"label": f"{o:g}X", "value": float(o),
                                          "disabled": float(o) == 1.0} for o in orders],
                                inputStyle={"marginRight": "4px"},
                                labelStyle={"marginRight": "12px"})]),
        html.Div([html.Label("Vectors", className="head"),
                  _radio(ids.COMPENSATION, [
                      {"label": "slow-roll compensated", "value": "compensated"},
                      {"label": "uncompensated", "value": "uncompensated"}], "compensated")]),
        html.Div([html.Label("Units", className="head"),
                  _radio(ids.UNITS, [{"label": "metric (µm pp, mm/s)", "value": "metric"},
                                     {"label": "imperial (mil pp, in/s)", "value": "imperial"}],
                         "metric")]),
        html.Div([html.Label("Bode phase", className="head"),
                  _radio(ids.PHASE, [
                      {"label": "unwrapped (continuous along speed)", "value": "unwrapped"},
                      {"label": "wrapped 0–360°", "value": "wrapped"}], "unwrapped")]),
    ])
    plots = [
        html.Div(className="grid2", children=[
            html.Div(className="card", children=[_graph(ids.BODE, 560)]),
            html.Div(className="card", children=[
                _graph(ids.POLAR, 560),
                html.P("Hover a speed on either plot to mark it on the other.",
                       className="note")])]),
        html.Div(className="grid2eq", children=[
            html.Div(className="card", children=[_graph(ids.DIRECT, 420)]),
            html.Div(className="card", children=[
                _graph(ids.SPEED, 360),
                html.P("Shaded: the band of each critical (half-power band where known) and "
                       "the seconds the machine spent in it.", className="note")])]),
        html.Div(className="grid2eq", children=[
            html.Div(className="card", children=[_graph(ids.CASCADE, 460)]),
            html.Div(className="card", children=[
                _graph(ids.CAMPBELL, 460),
                html.Label("Natural frequencies to draw (Hz, comma separated)",
                           className="note"),
                dcc.Input(id=ids.NATURAL_FREQS, type="text", debounce=True,
                          placeholder="e.g. 41.5, 96", style={"width": "240px",
                                                              "marginLeft": "8px"}),
                html.Div(id=ids.NATURAL_FREQS_NOTE, className="note")])]),
        html.Div(className="card", children=[
            html.Div(className="controls", children=[
                html.Div([html.Label("Probe pair", className="head"),
                          dcc.Dropdown(id=ids.ORBIT_PAIR, clearable=False,
                                       options=[{"label": f"{x} / {y}", "value": f"{x}|{y}"}
                                                for x, y in pairs],
                                       value=f"{pairs[0][0]}|{pairs[0][1]}" if pairs else None,
                                       style={"width": "300px"})]),
                html.Div([html.Label("Speed (rpm)", className="head"),
                          dcc.Input(id=ids.ORBIT_SPEED, type="number", debounce=True, min=0,
                                    value=round(m.spec.max_continuous_speed_rpm),
                                    style={"width": "120px"})]),
                html.Div([html.Label("Direction", className="head"),
                          _radio(ids.ORBIT_DIRECTION, [
                              {"label": "any", "value": "any"},
                              {"label": "run-up", "value": "run-up"},
                              {"label": "coast-down", "value": "coast-down"}], "any")])]),
            html.Div(className="grid2eq", children=[
                _graph(ids.ORBIT, 480),
                html.Div([html.P(id=ids.ORBIT_NOTE, className="note"),
                          html.P("Filtered: the 1X ellipse from the two 1X vectors. "
                                 "Unfiltered: the raw samples of that one revolution. The "
                                 "large dot is the once-per-rev event; whirl is forward when "
                                 "the orbit turns with the shaft.", className="note")])])]),
    ]
    return html.Div([dcc.Store(id=ids.RUN_ID, data=run_id), head, verdict, controls, *plots])


# ----------------------------------------------------------------------------- callbacks
# Linked cursor, drawn in the browser: a hover on one plot moves the cursor marker of the
# other to the nearest point of its first data trace (speeds travel in customdata).
_CURSOR_JS = """
function(hover, fig, target) {
    var nu = window.dash_clientside.no_update;
    var T = {f8: Float64Array, f4: Float32Array, i4: Int32Array, u4: Uint32Array,
             i2: Int16Array, u2: Uint16Array, i1: Int8Array, u1: Uint8Array};
    function arr(a) {  // figure arrays may arrive base64-encoded ({dtype, bdata})
        if (a && a.bdata !== undefined && T[a.dtype]) {
            var bin = atob(a.bdata), u8 = new Uint8Array(bin.length);
            for (var q = 0; q < bin.length; q++) { u8[q] = bin.charCodeAt(q); }
            return new T[a.dtype](u8.buffer);
        }
        return a || [];
    }
    if (!hover || !hover.points || !hover.points.length || !fig || !fig.data) { return nu; }
    var p = hover.points[0];
    var s = p.customdata;
    if (Array.isArray(s)) { s = s[s.length - 1]; }
    if (s === undefined || s === null) { s = p.x; }
    if (typeof s !== 'number') { return nu; }
    var data = fig.data.slice();
    var src = [];
    for (var i = 0; i < data.length; i++) { if (data[i].meta === 'data') { src.push(i); } }
    var cur = [];
    for (var j = 0; j < data.length; j++) { if (data[j].meta === 'cursor') { cur.push(j); } }
    if (!src.length || !cur.length) { return nu; }
    // nearest speed over every data trace (Bode: amplitude/phase pairs; polar: each curve)
    var step = (target === 'polar') ? 1 : 2, bi = -1, best = 0, err = Infinity;
    for (var m = 0; m + step - 1 < src.length; m += step) {
        var sp = arr(data[src[m]].customdata);
        for (var k = 0; k < sp.length; k++) {
            var e = Math.abs(sp[k] - s); if (e < err) { err = e; best = k; bi = m; }
        }
    }
    if (bi < 0) { return nu; }
    var d0 = data[src[bi]];
    if (target === 'polar') {
        data[cur[0]] = Object.assign({}, data[cur[0]],
                                     {r: [arr(d0.r)[best]], theta: [arr(d0.theta)[best]]});
    } else {
        var d1 = data[src[bi + 1]] || d0;
        data[cur[0]] = Object.assign({}, data[cur[0]],
                                     {x: [arr(d0.x)[best]], y: [arr(d0.y)[best]]});
        if (cur.length > 1) {
            data[cur[1]] = Object.assign({}, data[cur[1]],
                                         {x: [arr(d1.x)[best]], y: [arr(d1.y)[best]]});
        }
    }
    return Object.assign({}, fig, {data: data});
}
"""


def register_callbacks(app, db) -> None:
    from dash import ALL, Input, Output, State, ctx, no_update

    from rundash.dashboard.cache import cache_of

    cache = cache_of(app, db)  # one per app: keyed by run and processing time
    reports.register_callbacks(app, db)  # report downloads of the actions row

    def _units(units):
        return units if units in UNIT_SYSTEMS else "metric"

    @app.callback(Output(ids.BODE, "figure"),
                  Input(ids.PROBE, "value"), Input(ids.ORDERS, "value"),
                  Input(ids.COMPENSATION, "value"), Input(ids.UNITS, "value"),
                  Input(ids.PHASE, "value"), State(ids.RUN_ID, "data"))
    def _bode(probe, orders, compensation, units, phase, run_id):
        if not probe or run_id is None:
            return no_update
        return bode_figure(db, run_id, probe, orders or [1.0], compensation, _units(units),
                           phase or "unwrapped", cache=cache)

    @app.callback(Output(ids.POLAR, "figure"), Output(ids.DIRECT, "figure"),
                  Input(ids.PROBE, "value"), Input(ids.COMPENSATION, "value"),
                  Input(ids.UNITS, "value"), State(ids.RUN_ID, "data"))
    def _polar_direct(probe, compensation, units, run_id):
        if not probe or run_id is None:
            return no_update, no_update
        return polar_direct_figures(db, run_id, probe, compensation, _units(units),
                                    cache=cache)

    @app.callback(Output(ids.CASCADE, "figure"), Input(ids.PROBE, "value"),
                  Input(ids.UNITS, "value"), State(ids.RUN_ID, "data"))
    def _cascade(probe, units, run_id):
        if not probe or run_id is None:
            return no_update
        return cascade_figure(db, run_id, probe, _units(units), cache=cache)

    @app.callback(Output(ids.SPEED, "figure"), Input(ids.PROBE, "value"),
                  State(ids.RUN_ID, "data"))
    def _speed(probe, run_id):
        if run_id is None:
            return no_update
        return speed_figure(db, run_id, probe, cache=cache)

    @app.callback(Output(ids.CAMPBELL, "figure"), Output(ids.NATURAL_FREQS_NOTE, "children"),
                  Input(ids.NATURAL_FREQS, "value"), State(ids.RUN_ID, "data"))
    def _campbell(text, run_id):
        if run_id is None:
            return no_update, no_update
        return campbell_figure(db, run_id, text, cache=cache)

    @app.callback(Output(ids.ORBIT, "figure"), Output(ids.ORBIT_NOTE, "children"),
                  Input(ids.ORBIT_PAIR, "value"), Input(ids.ORBIT_SPEED, "value"),
                  Input(ids.ORBIT_DIRECTION, "value"), Input(ids.UNITS, "value"),
                  State(ids.RUN_ID, "data"))
    def _orbit(pair, speed, direction, units, run_id):
        if run_id is None:
            return no_update, no_update
        return orbit_figure(db, run_id, pair, speed, direction, _units(units), cache=cache)

    @app.callback(Output(ids.VERDICT_PANEL, "children"), Input(ids.UNITS, "value"),
                  State(ids.RUN_ID, "data"), prevent_initial_call=True)
    def _verdict(units, run_id):
        return verdict_panel(load_context(db, run_id, cache=cache), _units(units))

    @app.callback(Output(ids.EVIDENCE, "children"),
                  Input({"type": CRITICAL_ROW, "index": ALL}, "n_clicks"),
                  Input(ids.BODE, "clickData"),
                  State(ids.UNITS, "value"), State(ids.RUN_ID, "data"),
                  prevent_initial_call=True)
    def _evidence(row_clicks, click, units, run_id):
        index = None
        trig = ctx.triggered_id
        if isinstance(trig, dict) and trig.get("type") == CRITICAL_ROW:
            if not any(row_clicks or []):
                return no_update  # rows drawn anew, nothing clicked
            index = int(trig["index"])
        elif trig == ids.BODE and click:
            index = critical_index_from_click(
                load_context(db, run_id, cache=cache)["findings"], click)
            if index is None:
                return no_update
        return evidence_panel(load_context(db, run_id, cache=cache)["findings"], index,
                              _units(units))

    app.clientside_callback(
        _CURSOR_JS.replace("function(hover, fig, target)", "function(hover, fig)")
        .replace("target === 'polar'", "true"),
        Output(ids.POLAR, "figure", allow_duplicate=True), Input(ids.BODE, "hoverData"),
        State(ids.POLAR, "figure"), prevent_initial_call=True)
    app.clientside_callback(
        _CURSOR_JS.replace("function(hover, fig, target)", "function(hover, fig)")
        .replace("target === 'polar'", "false"),
        Output(ids.BODE, "figure", allow_duplicate=True), Input(ids.POLAR, "hoverData"),
        State(ids.BODE, "figure"), prevent_initial_call=True)


def critical_index_from_click(findings, click) -> int | None:
    """Index (in the findings' criticals) of the critical marker a Bode click hit."""
    pts = (click or {}).get("points") or []
    if not pts:
        return None
    cd = pts[0].get("customdata")
    if not (isinstance(cd, (list, tuple)) and len(cd) == 2):
        return None
    speed = float(cd[1])
    crit = _criticals(findings)
    probe_hits = [i for i, c in enumerate(crit) if c.get("speed_rpm") is not None
                  and abs(float(c["speed_rpm"]) - speed) < 1e-6]
    return probe_hits[0] if probe_hits else None
