"""Run review, layout: the page and its verdict panel, built from the findings through
:mod:`rundash.presentation` (the same rows and numbers as the CLI and the report)."""

from __future__ import annotations

from typing import Any

from rundash import CAUTION
from rundash import presentation as pr
from rundash.dashboard import exports, ids, reports
from rundash.dashboard.folds import EAGER_ROWS
from rundash.dashboard.pages.review.data import (
    criticals_of, load_context, mount_text, orbit_pairs,
)
from rundash.errors import NotFoundError


def probe_kinds(ctx: dict[str, Any]) -> dict[str, str]:
    """Transducer kind per probe of the run's stored channels (for findings written before
    the findings carried them)."""
    return {c.probe_name: c.kind for c in ctx.get("channels") or [] if c.role == "probe"}


CRITICAL_COLUMNS = [("probe", "Probe"), ("direction", "Direction"), ("speed", "Speed (rpm)"),
                    ("basis", "Speed from"), ("peak", "Peak 1X"), ("af", "AF (method)"),
                    ("apparent", "Apparent (sweep): rpm, AF"),
                    ("sweep_free", "Sweep-free (modal fit): rpm, AF"),
                    ("side", "Side (margin from)"), ("margin", "Margin found (% of N)"),
                    ("required", "Required (% of N)"), ("verdict", "Margin verdict"),
                    ("confidence", "Confidence")]
LIMIT_COLUMNS = [("probe", "Probe"), ("direction", "Direction"), ("measure", "Measure"),
                 ("where", "Where"), ("speed", "Speed (rpm)"), ("value", "Level"),
                 ("limit", "Limit"), ("zone", "Zone"), ("verdict", "Verdict"),
                 ("basis", "Basis")]
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


#: Review states in which the engineer's decisions exist (rundash.analysis.review).
DECIDED_STATES = ("reviewed", "signed off", "signed off (earlier processing)")


def verdict_panel(ctx: dict[str, Any], system: str = "metric"):
    """The verdict section: what was found, against what, how sure, and the caution.

    With ``ctx['review']`` (the run's review object) holding decisions, the verdict after
    the review heads the panel and the automatic one is said beside it."""
    from dash import html

    from rundash.dashboard.pages.runs import verdict_badge

    f = ctx["findings"]
    proc = ctx["processing"]
    kinds = probe_kinds(ctx)
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
        rv = ctx.get("review") or {}
        if rv.get("state") in DECIDED_STATES and rv.get("run_verdict"):
            # the engineer's decisions govern: the decided verdict first, the automatic beside
            children.append(html.H2(["Verdict after review ",
                                     verdict_badge(rv["run_verdict"], True, big=True)],
                                    id=ids.VERDICT_HEAD))
            children.append(html.P(
                f"Review state: {rv['state']}. Automatic verdict: "
                f"{f.get('run_verdict') or '–'}"
                + ("; the engineer's decisions change it" if rv.get("verdict_changed")
                   else "; the engineer's decisions leave it as it is")
                + " (the decisions are in the review card below).", className="muted",
                id=ids.VERDICT_AUTOMATIC))
        else:
            children.append(html.H2(["Verdict ", verdict_badge(f.get("run_verdict"), True,
                                                                big=True)], id=ids.VERDICT_HEAD))
        children.append(html.P(pr.summary_line(f), id=ids.VERDICT_SUMMARY))
        reasons = pr.verdict_reasons(f, system, kinds=kinds)
        if reasons:
            children.append(html.Div(className="reasons", id=ids.VERDICT_REASONS, children=[
                html.Strong("What fails:"), html.Ul([html.Li(r) for r in reasons])]))
        children.append(html.P(f"Guidance profile: {prof.get('title') or prof.get('name') or '–'}",
                               className="muted"))
        if prof.get("confidence_note"):  # how sure the profile is: said once, here
            children.append(html.P(prof["confidence_note"], className="warn",
                                   id=ids.PROFILE_CONFIDENCE))
        elif prof.get("needs_confirmation"):
            children.append(html.P("The guidance profile needs your confirmation.",
                                   className="warn", id=ids.PROFILE_CONFIDENCE))
        crit = pr.critical_rows(f, system, kinds=kinds)
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
        modal = pr.modal_model_lines(f)
        if modal:
            children.append(html.H3("Modal model of the run (sweep-free)"))
            children.append(html.Ul([html.Li(x) for x in modal]))
        split = pr.bearing_mode_lines(f)
        if split:
            children.append(html.H3("Criticals per bearing (major axis of the 1X orbit)"))
            children.append(html.Ul([html.Li(x) for x in split]))
            children += _split_views_fold(f)
        bearings = pr.bearing_lines(f)
        if bearings:
            children.append(html.H3("Agreement between probes of a bearing"))
            children.append(html.Ul([html.Li(b) for b in bearings]))
        children += _limits_section(f, system, kinds)
    warn, standing = pr.split_standing(pr.warnings_of(f, proc.warnings if proc else []))
    if warn:
        children.append(html.H3(f"Warnings ({len(warn)})"))
        children.append(html.Div(id=ids.WARNINGS, children=[
            html.Div(w, className="warn") for w in warn]))
    if standing:  # notes that hold for every run: not styled as warnings
        children.append(html.H3("Notes"))
        children.append(html.Div(id=ids.STANDING_NOTES, children=[
            html.Div(w, className="standing") for w in standing]))
    children.append(html.P((f or {}).get("caution") or CAUTION, className="note",
                           style={"fontStyle": "italic", "marginTop": "10px"}))
    return html.Div(children)


def _split_views_fold(f) -> list:
    """The per-bearing split views, folded: each is a plotly figure the browser takes
    ~0.1–0.3 s to draw, so they are built and drawn when the fold is first opened
    (:func:`split_views`, the callback on the summary's clicks)."""
    from dash import html

    n = len(f.get("bearing_modes") or [])
    if not n:
        return []
    return [html.Details(id=ids.SPLIT_VIEWS, className="reference", children=[
        html.Summary(f"Split view of {'each of the ' + str(n) + ' bearings' if n > 1 else 'the bearing'}: "
                     "the fitted major axis of the 1X orbit against speed (drawn when "
                     "opened)", id=ids.SPLIT_VIEWS_SUMMARY, n_clicks=0),
        html.Div(id=ids.SPLIT_VIEWS_BODY)])]


def split_views(f, system, kinds) -> list:
    """The split view of each bearing with an X/Y pair in the run's modal model."""
    from dash import dcc

    from rundash import figures

    return [dcc.Graph(figure=figures.bearing_modes(
        b, kind=kinds.get((b.get("probes") or [""])[0], "proximity"), system=system),
        config={"displaylogo": False}, className="split-view")
        for b in f.get("bearing_modes") or []]


def _rising_section(f) -> list:
    from dash import html

    rising = pr.rising_lines(f)
    if not rising:
        return []
    items = [html.Li([html.Strong(f"{who}: "), text, " — a critical may lie above this run's "
                      "top speed: not located, not judged."]) for who, text in rising]
    return [html.H3(f"Response still rising at the top speed ({len(rising)})"),
            html.Div(className="attention", id=ids.RISING_AT_TOP, children=html.Ul(items))]


def _directions_section(f) -> list:
    from dash import html

    rows = pr.direction_rows(f)
    if not rows:
        return []
    cols = [("probe", "Probe"), ("up", "Run-up critical (rpm)"),
            ("down", "Coast-down critical (rpm)"), ("diff", "Speed difference"),
            ("af", "AF difference"), ("agreement", "Agreement"), ("note", "Note")]
    return [html.H3(f"Run-up versus coast-down ({len(rows)})"),
            _table(cols, rows, ids.DIRECTIONS_TABLE)]


def _limits_section(f, system, kinds) -> list:
    from dash import html

    lims = pr.limit_rows(f, system, kinds=kinds)
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
    note = next((r["where_note"] for r in lims if r.get("where_note")), None)
    if note:  # which speed the top-speed checks use, and why
        out.append(html.P(f"Top speed: {note}.", className="note", id=ids.TOP_SPEED_NOTE))
    else:
        out.append(html.P("No limit check is judged for this run (all are for reference).",
                          className="muted", id=ids.LIMITS_TABLE))
    if ref:  # folded by the browser (a details element)
        out.append(html.Details(id=ids.LIMITS_REFERENCE, className="reference", children=[
            html.Summary(f"{len(ref)} reference-only rows: zones and limits shown for "
                         "orientation (meant for steady operation or for the top speed), "
                         "not verdicts", id=ids.LIMITS_REFERENCE_SUMMARY, n_clicks=0),
            html.Div(_table(LIMIT_COLUMNS, ref) if len(ref) <= EAGER_ROWS else [],
                     id=ids.LIMITS_REFERENCE_BODY)]))
    return out


def reference_limits_table(f, system, kinds):
    """The folded reference-only limit rows as a table, or None when the fold was filled
    with the page (no more than :data:`EAGER_ROWS` rows)."""
    ref = [r for r in pr.limit_rows(f, system, kinds=kinds) if not r["judged"]]
    return _table(LIMIT_COLUMNS, ref) if len(ref) > EAGER_ROWS else None


def evidence_panel(findings, index: int | None, system: str = "metric", *, kinds=None):
    """The numbers behind one critical: speeds, AF estimates, margin, evidence lines."""
    from dash import html

    crit = criticals_of(findings)
    if index is None or not (0 <= index < len(crit)):
        return ""
    c = crit[index]
    rows = [html.Tr([html.Th(label), html.Td(txt)])
            for label, txt in pr.evidence_rows(findings, index, system, kinds=kinds)]
    ev = c.get("evidence") or []
    return html.Div(className="card", style={"borderColor": "#0072B2"}, children=[
        html.H3(f"Evidence: {c.get('probe', '?')} {c.get('direction', '')} critical at "
                f"{pr.number(c.get('speed_rpm'))} rpm"),
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
    from rundash.workflows.review import review_of

    review = review_of(db, run_id)
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
        reports.run_actions(db, run, proc is not None, review),
        *([exports.review_controls()] if proc is not None else [])])
    verdict = html.Div(id=ids.VERDICT_PANEL, className="card",
                       children=verdict_panel(dict(ctx, review=review), "metric"))
    if proc is None:
        from rundash.dashboard.pages.review.housekeeping import housekeeping_card

        return html.Div([dcc.Store(id=ids.RUN_ID, data=run_id), head, verdict,
                         housekeeping_card(run, False)])
    tach_deg = float(m.tach.angle_deg or 0.0) if m.tach else 0.0
    probe_opts = [{"label": p.name, "title": ", ".join(
        [p.kind, f"bearing {p.bearing or '–'}"]
        + ([f"axis {p.axis}"] if p.axis and p.axis != "none" else [])
        + [f"mounted at {mount_text(p.angle_deg, tach_deg, m.spec.rotation)}"]),
        "value": p.name} for p in probes]
    crit = criticals_of(ctx["findings"])
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
        html.Div([html.Label("X and Y", className="head"),
                  dcc.Checklist(id=ids.BODE_PAIR, value=[], options=[
                      {"label": " both probes of the bearing on the Bode (1X)",
                       "value": "pair"}])]),
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
    from rundash.dashboard.pages.review.decisions import review_card
    from rundash.dashboard.pages.review.housekeeping import housekeeping_card

    return html.Div([dcc.Store(id=ids.RUN_ID, data=run_id), head, verdict, review_card(review),
                     controls, *plots, housekeeping_card(run, bool(review["sign_offs"]))])
