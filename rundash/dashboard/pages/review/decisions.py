"""Run review, the engineer's decisions: accept / reject / correct each critical, add a
critical by clicking the Bode or polar plot, annotate a plot at a speed, sign the run off.
Every action calls :mod:`rundash.workflows.review`, the functions ``rundash review``
calls; the reviewer's name comes from a field on the page, never from the login."""

from __future__ import annotations

from datetime import date
from typing import Any

from rundash.workflows.review import RECORD_NOTE, REJECT_REASONS
from rundash.dashboard import ids
from rundash.errors import RundashError

ACTIONS = [{"label": "accept", "value": "accept"}, {"label": "reject", "value": "reject"},
           {"label": "correct speed / AF", "value": "correct"}]
SIGN_DECISIONS = [{"label": w, "value": w} for w in
                  ("accepted", "accepted with remarks", "not accepted")]


def _n(x, fmt="{:,.0f}") -> str:
    return "–" if x is None else fmt.format(x)


def target_key(c: dict[str, Any]) -> str:
    """The dropdown value naming an automatic critical: probe|direction|speed."""
    return f"{c['probe']}|{c['direction']}|{c['automatic']['speed_rpm']!r}"


def status_panel(review: dict[str, Any]):
    """The decided set beside the automatic readings, the verdict after the review, the
    annotations, the sign-off and the notes."""
    from dash import html

    from rundash.dashboard.pages.runs import verdict_badge

    kids = [html.H3(["Verdict after the engineer's review ",
                     verdict_badge(review.get("run_verdict"), True)],
                    id="review-decided-verdict"),
            html.P(f"Review state: {review['state']} · automatic verdict "
                   f"{review.get('automatic_verdict') or '–'}", className="muted")]
    head = ("Probe", "Direction", "Automatic rpm", "Automatic AF", "Automatic verdict",
            "Decision", "Decided rpm", "Decided AF", "Margin", "Verdict", "By")
    rows = []
    for c in review.get("criticals", []) + review.get("added", []):
        a = c.get("automatic") or {}
        eng = c["source"] == "engineer"
        who = c.get("by") or "–"
        if c.get("earlier_processing") and c["decision"] != "undecided":
            who += " (earlier processing)"
        cells = [c["probe"], c["direction"], _n(a.get("speed_rpm")), _n(a.get("af"), "{:.2f}"),
                 a.get("margin_verdict") or "–",
                 c["decision"] + (f": {c['reason']}" if c.get("reason") else ""),
                 _n(c["speed_rpm"]) + (" (engineer)" if eng else ""), _n(c["af"], "{:.2f}"),
                 _n(c.get("separation_margin_pct"), "{:.1f} %"), c.get("margin_verdict") or "–",
                 who]
        rows.append(html.Tr([html.Td(x) for x in cells],
                            className="engineer" if c["decision"] != "undecided" else None))
    if rows:
        kids.append(html.Table([html.Thead(html.Tr([html.Th(h) for h in head])),
                                html.Tbody(rows)], className="plain", id="review-decided"))
    if review.get("annotations"):
        kids.append(html.Ul(id="review-annotations", children=[
            html.Li(f"{a['plot']}{' ' + a['probe'] if a['probe'] else ''} at "
                    f"{_n(a['speed_rpm'])} rpm: {a['text']} ({a['by']})")
            for a in review["annotations"]]))
    s = review.get("sign_off")
    if s:
        kids.append(html.Div(id="review-signed", className="attention" if not s["current"]
                             else "card", children=[
            html.Strong(f"Signed off: {s['decision']} by {s['name']}"
                        + (f" ({s['role']})" if s["role"] else "") + f" on {s['signed_on']}"),
            html.Div(f"Remarks: {s['remarks']}" if s["remarks"] else ""),
            html.Div(s["note"])]))
    for n in review.get("notes", []):
        kids.append(html.P(n, className="note"))
    kids.append(html.P(RECORD_NOTE + " On a password-protected dashboard everyone shares one "
                       "login: the name recorded is the one typed in the field below.",
                       className="note"))
    return kids


def review_card(review: dict[str, Any]):
    """The review card: status and the forms."""
    from dash import dcc, html

    opts = [{"label": f"{c['probe']} {c['direction']} {_n(c['automatic']['speed_rpm'])} rpm",
             "value": target_key(c)} for c in review.get("criticals", [])]
    inp = {"debounce": False, "style": {"width": "120px"}}
    return html.Div(id=ids.REVIEW_CARD, className="card", children=[
        html.H2("The engineer's review"),
        dcc.Store(id=ids.REVIEW_VERSION, data=0),
        html.Div(id=ids.REVIEW_STATUS, children=status_panel(review)),
        html.Div(id=ids.REVIEW_MESSAGE, className="note", role="status"),
        html.Div(className="controls", children=[
            html.Div([html.Label("Reviewer (your name)", className="head"),
                      dcc.Input(id=ids.REVIEW_BY, type="text", placeholder="name",
                                style={"width": "200px"})]),
            html.Div([html.Label("Note kept with the entry", className="head"),
                      dcc.Input(id=ids.REVIEW_NOTE, type="text", style={"width": "320px"})])]),
        html.H3("Decide on a critical"),
        html.Div(className="controls", children=[
            html.Div([html.Label("Critical", className="head"),
                      dcc.Dropdown(id=ids.REVIEW_TARGET, options=opts,
                                   value=opts[0]["value"] if opts else None,
                                   clearable=False, style={"width": "320px"})]),
            html.Div([html.Label("Decision", className="head"),
                      dcc.RadioItems(id=ids.REVIEW_ACTION, options=ACTIONS, value="accept",
                                     inline=True, labelStyle={"marginRight": "10px"})]),
            html.Div([html.Label("Reason (reject)", className="head"),
                      dcc.Dropdown(id=ids.REVIEW_REASON, options=list(REJECT_REASONS),
                                   value=REJECT_REASONS[0], clearable=False,
                                   style={"width": "200px"})]),
            html.Div([html.Label("Speed read (rpm, correct)", className="head"),
                      dcc.Input(id=ids.REVIEW_SPEED, type="number", min=0, **inp)]),
            html.Div([html.Label("AF read (correct)", className="head"),
                      dcc.Input(id=ids.REVIEW_AF, type="number", min=0, **inp)]),
            html.Button("Record decision", id=ids.REVIEW_RECORD, n_clicks=0)]),
        html.H3("Add a missed critical or annotate a plot"),
        html.P("Click the Bode or polar plot at a speed: the speed below is filled in; the "
               "probe is the one shown on the plots.", className="note"),
        html.Div(className="controls", children=[
            html.Div([html.Label("Speed (rpm)", className="head"),
                      dcc.Input(id=ids.REVIEW_PICK_SPEED, type="number", min=0, **inp)]),
            html.Div([html.Label("Picked on", className="head"),
                      dcc.RadioItems(id=ids.REVIEW_PICK_FROM, inline=True, value="bode",
                                     options=["bode", "polar"],
                                     labelStyle={"marginRight": "10px"})]),
            html.Div([html.Label("Direction", className="head"),
                      dcc.RadioItems(id=ids.REVIEW_ADD_DIRECTION, inline=True,
                                     value="run-up", options=["run-up", "coast-down"],
                                     labelStyle={"marginRight": "10px"})]),
            html.Div([html.Label("AF (optional)", className="head"),
                      dcc.Input(id=ids.REVIEW_ADD_AF, type="number", min=0, **inp)]),
            html.Button("Add critical", id=ids.REVIEW_ADD, n_clicks=0),
            html.Div([html.Label("Annotation text", className="head"),
                      dcc.Input(id=ids.REVIEW_ANNOTATE_TEXT, type="text",
                                style={"width": "260px"})]),
            html.Button("Annotate the plot", id=ids.REVIEW_ANNOTATE, n_clicks=0)]),
        html.H3("Sign-off"),
        html.Div(className="controls", children=[
            html.Div([html.Label("Name", className="head"),
                      dcc.Input(id=ids.SIGN_NAME, type="text", style={"width": "200px"})]),
            html.Div([html.Label("Role", className="head"),
                      dcc.Input(id=ids.SIGN_ROLE, type="text", style={"width": "200px"})]),
            html.Div([html.Label("Decision", className="head"),
                      dcc.Dropdown(id=ids.SIGN_DECISION, options=SIGN_DECISIONS,
                                   value="accepted", clearable=False,
                                   style={"width": "220px"})]),
            html.Div([html.Label("Remarks", className="head"),
                      dcc.Input(id=ids.SIGN_REMARKS, type="text", style={"width": "300px"})]),
            html.Div([html.Label("Date", className="head"),
                      dcc.Input(id=ids.SIGN_DATE, type="text", value=date.today().isoformat(),
                                style={"width": "110px"})]),
            html.Button("Sign off", id=ids.SIGN_BUTTON, n_clicks=0)]),
        html.P(RECORD_NOTE, className="note")])


def picked_speed(click) -> float | None:
    """The speed of a click on the Bode (x) or polar (customdata) plot."""
    pts = (click or {}).get("points") or []
    if not pts:
        return None
    p = pts[0]
    cd = p.get("customdata")
    if isinstance(cd, (list, tuple)):
        cd = cd[-1] if cd else None
    for v in (cd, p.get("x")):
        if isinstance(v, (int, float)):
            return round(float(v), 1)
    return None


def act(db, run_id: int, trigger: str, v: dict[str, Any]) -> str:
    """Carry out one page action; returns the message to show (errors in one line)."""
    from rundash.workflows import review as wr

    try:
        if trigger == ids.REVIEW_RECORD:
            if not v.get("target"):
                return "No critical to decide on."
            probe, direction, speed = v["target"].split("|")
            res = wr.record(db, run_id, v["action"], reviewer=v.get("by") or "", probe=probe,
                            direction=direction, speed_rpm=float(speed),
                            to_speed_rpm=v.get("speed"), af=v.get("af"),
                            reason=v.get("reason") or "", text=v.get("note") or "")
        elif trigger == ids.REVIEW_ADD:
            res = wr.record(db, run_id, "add", reviewer=v.get("by") or "", probe=v["probe"],
                            direction=v.get("direction"), speed_rpm=v.get("pick"),
                            af=v.get("add_af"), text=v.get("note") or "")
        elif trigger == ids.REVIEW_ANNOTATE:
            res = wr.record(db, run_id, "annotate", reviewer=v.get("by") or "",
                            probe=v["probe"], plot=v.get("plot") or "bode",
                            speed_rpm=v.get("pick"), text=v.get("text") or "")
        elif trigger == ids.SIGN_BUTTON:
            res = wr.sign_off(db, run_id, name=v.get("sign_name") or "",
                              role=v.get("sign_role") or "", decision=v.get("sign_decision"),
                              remarks=v.get("sign_remarks") or "",
                              signed_on=v.get("sign_date") or None)
            return f"Signed off ({res['review']['sign_off']['decision']}); entry {res['uid']}."
        else:
            return ""
    except (RundashError, ValueError) as exc:
        return f"Not recorded: {exc}"
    before, after = res["changed"].get("run_verdict", [None, None])
    return f"Recorded ({res['action']}); verdict {before} → {after}; entry {res['uid']}."


def register_callbacks(app, db) -> None:
    from dash import Input, Output, State, ctx, no_update

    from rundash.workflows.review import review_of

    @app.callback(Output(ids.REVIEW_PICK_SPEED, "value"), Output(ids.REVIEW_PICK_FROM, "value"),
                  Input(ids.BODE, "clickData"), Input(ids.POLAR, "clickData"),
                  prevent_initial_call=True)
    def _pick(bode_click, polar_click):
        which = "bode" if ctx.triggered_id == ids.BODE else "polar"
        s = picked_speed(bode_click if which == "bode" else polar_click)
        return (no_update, no_update) if s is None else (s, which)

    fields = [(ids.REVIEW_BY, "by"), (ids.REVIEW_NOTE, "note"), (ids.REVIEW_TARGET, "target"),
              (ids.REVIEW_ACTION, "action"), (ids.REVIEW_REASON, "reason"),
              (ids.REVIEW_SPEED, "speed"), (ids.REVIEW_AF, "af"),
              (ids.REVIEW_PICK_SPEED, "pick"), (ids.REVIEW_PICK_FROM, "plot"),
              (ids.REVIEW_ADD_DIRECTION, "direction"), (ids.REVIEW_ADD_AF, "add_af"),
              (ids.REVIEW_ANNOTATE_TEXT, "text"), (ids.PROBE, "probe"),
              (ids.SIGN_NAME, "sign_name"), (ids.SIGN_ROLE, "sign_role"),
              (ids.SIGN_DECISION, "sign_decision"), (ids.SIGN_REMARKS, "sign_remarks"),
              (ids.SIGN_DATE, "sign_date")]

    @app.callback(Output(ids.REVIEW_STATUS, "children"), Output(ids.REVIEW_MESSAGE, "children"),
                  Output(ids.REVIEW_VERSION, "data"),
                  Input(ids.REVIEW_RECORD, "n_clicks"), Input(ids.REVIEW_ADD, "n_clicks"),
                  Input(ids.REVIEW_ANNOTATE, "n_clicks"), Input(ids.SIGN_BUTTON, "n_clicks"),
                  State(ids.RUN_ID, "data"), State(ids.REVIEW_VERSION, "data"),
                  *[State(i, "value") for i, _ in fields], prevent_initial_call=True)
    def _act(_r, _a, _n, _s, run_id, version, *values):
        v = {key: x for (_, key), x in zip(fields, values)}
        v["probe"] = v["probe"] or ""
        msg = act(db, run_id, ctx.triggered_id, v)
        return status_panel(review_of(db, run_id)), msg, (version or 0) + 1
