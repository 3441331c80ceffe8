"""Run review, callbacks: thin, each decodes the controls, calls one function of
:mod:`.data` or :mod:`.layout` and returns its figure or component."""

from __future__ import annotations

from rundash.dashboard import exports, reports
from rundash.dashboard.pages.review import decisions, housekeeping
from rundash.figures.review_marks import mark_review
from rundash.workflows.review import review_of
from rundash.dashboard.pages.review.data import (
    UNIT_SYSTEMS, bode_figure, campbell_figure, cascade_figure, criticals_of, load_context,
    orbit_figure, polar_direct_figures, speed_figure,
)
from rundash.dashboard.pages.review.layout import (
    CRITICAL_ROW, evidence_panel, probe_kinds, reference_limits_table, split_views,
    verdict_panel,
)
from rundash.dashboard import ids


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
    exports.register_callbacks(app, db)  # table downloads (review and compare pages)

    def _units(units):
        return units if units in UNIT_SYSTEMS else "metric"

    decisions.register_callbacks(app, db)  # the engineer's decisions and sign-off
    housekeeping.register_callbacks(app, db)  # edit and delete the run

    @app.callback(Output(ids.BODE, "figure"),
                  Input(ids.PROBE, "value"), Input(ids.ORDERS, "value"),
                  Input(ids.COMPENSATION, "value"), Input(ids.UNITS, "value"),
                  Input(ids.PHASE, "value"), Input(ids.REVIEW_VERSION, "data"),
                  Input(ids.BODE_PAIR, "value"), State(ids.RUN_ID, "data"))
    def _bode(probe, orders, compensation, units, phase, _version, pair, run_id):
        if not probe or run_id is None:
            return no_update
        fig = bode_figure(db, run_id, probe, orders or [1.0], compensation, _units(units),
                          phase or "unwrapped", cache=cache, with_pair=bool(pair))
        return mark_review(fig, review_of(db, run_id), probe, plot="bode")

    @app.callback(Output(ids.POLAR, "figure"), Output(ids.DIRECT, "figure"),
                  Input(ids.PROBE, "value"), Input(ids.COMPENSATION, "value"),
                  Input(ids.UNITS, "value"), Input(ids.REVIEW_VERSION, "data"),
                  State(ids.RUN_ID, "data"))
    def _polar_direct(probe, compensation, units, _version, run_id):
        if not probe or run_id is None:
            return no_update, no_update
        polar, direct = polar_direct_figures(db, run_id, probe, compensation, _units(units),
                                             cache=cache)
        return mark_review(polar, review_of(db, run_id), probe, plot="polar"), direct

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
                  Input(ids.REVIEW_VERSION, "data"), State(ids.RUN_ID, "data"),
                  prevent_initial_call=True)
    def _verdict(units, _version, run_id):
        ctx = load_context(db, run_id, cache=cache)
        return verdict_panel(dict(ctx, review=review_of(db, run_id)), _units(units))

    def built_when_opened(summary_id, body_id, build):
        """Fill a fold's body on the fold's first opening (its summary's first click) with
        ``build(findings, units, kinds)``; None from ``build`` leaves the body as it is."""
        @app.callback(Output(body_id, "children"), Input(summary_id, "n_clicks"),
                      State(ids.UNITS, "value"), State(ids.RUN_ID, "data"),
                      prevent_initial_call=True)
        def _fill(n_clicks, units, run_id):
            if n_clicks != 1:  # built on the first opening, kept after
                return no_update
            ctx = load_context(db, run_id, cache=cache)
            got = build(ctx["findings"] or {}, _units(units), probe_kinds(ctx))
            return no_update if got is None else got

    built_when_opened(ids.SPLIT_VIEWS_SUMMARY, ids.SPLIT_VIEWS_BODY, split_views)
    built_when_opened(ids.LIMITS_REFERENCE_SUMMARY, ids.LIMITS_REFERENCE_BODY,
                      reference_limits_table)

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
        ctx_ = load_context(db, run_id, cache=cache)
        return evidence_panel(ctx_["findings"], index, _units(units), kinds=probe_kinds(ctx_))

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
    crit = criticals_of(findings)
    probe_hits = [i for i, c in enumerate(crit) if c.get("speed_rpm") is not None
                  and abs(float(c["speed_rpm"]) - speed) < 1e-6]
    return probe_hits[0] if probe_hits else None
