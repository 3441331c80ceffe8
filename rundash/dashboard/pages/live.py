"""Live monitor page: a run being recorded, polled from the database.

Route ``/live`` (the run recorded last) or ``/live/<run id>``. Every poll reads the
recorder's status, the live vectors and the event log (short read transactions: the page
never blocks the recorder, and only whole committed batches are seen) and shows the
current speed and acceleration, an alert strip of the warnings that hold, Bode and polar
plots of 1X building up with the expected critical bands of earlier runs shaded, and the
event log. The warnings themselves are computed by the recorder
(:mod:`rundash.analysis.live_warnings`); this page only shows them.
"""

from __future__ import annotations

import re
from datetime import datetime, timezone

from rundash import CAUTION
from rundash.dashboard import ids

PATH = "/live"
TITLE = "Live monitor"
POLL_MS = 1000
STALE_S = 10.0  # a recording status older than this: the recorder is silent
_ROUTE = re.compile(r"^/live(?:/(\d+))?/?$")


def match(pathname: str):
    m = _ROUTE.match(pathname or "")
    if m is None:
        return None
    return {"run_id": int(m.group(1)) if m.group(1) else None}


def layout(db, run_id: int | None = None):
    from dash import dcc, html

    return html.Div(className="live-page", children=[
        html.H2("Live monitor"),
        dcc.Store(id=ids.LIVE_RUN, data=run_id),
        dcc.Interval(id=ids.LIVE_POLL, interval=POLL_MS),
        html.Div(id=ids.LIVE_STATUS, className="card"),
        html.Div(id=ids.LIVE_ALERTS, className="alert-strip"),
        html.Div(className="row", children=[
            dcc.Graph(id=ids.LIVE_BODE, style={"flex": "2"}),
            dcc.Graph(id=ids.LIVE_POLAR, style={"flex": "1"})]),
        html.H3("Event log"),
        html.Table(id=ids.LIVE_EVENTS, className="events"),
        html.P(CAUTION, className="muted"),
    ])


def snapshot(db, run_id: int | None) -> dict:
    """Everything the page shows, read in one short read transaction."""
    from rundash.storage import live_queries as lq
    from rundash.storage import queries as q

    with db.read() as conn:
        if run_id is None:
            run_id = lq.latest_live_run(conn)
        if run_id is None:
            return {"run_id": None}
        status = lq.load_status(conn, run_id)
        tracks = lq.load_live_tracks(conn, run_id, order=1.0)
        events = lq.load_events(conn, run_id)
        machine = q.get_machine(conn, q.run_machine_id(conn, run_id))
    bands = []
    for e in events:
        if e.kind == "recording":
            bands = [tuple(b) for b in e.details.get("bands", [])]
            break
    return {"run_id": run_id, "status": status, "tracks": tracks, "events": events,
            "bands": bands, "rotation": machine.spec.rotation or "ccw",
            "machine": machine.spec.name}


def active_alerts(events) -> list[tuple[str, str]]:
    """(severity, text) of the conditions that still hold after the event log so far."""
    on: dict[str, tuple[str, str]] = {}
    for e in events:
        d = e.details or {}
        if e.kind == "tach-lost":
            on["tach"] = (e.severity, e.message)
        elif e.kind == "tach-restored":
            on.pop("tach", None)
        elif e.kind in ("approaching", "entered-band", "dwell"):
            on[f"band{d.get('band')}"] = (e.severity, e.message)
        elif e.kind == "left-band":
            on.pop(f"band{d.get('band')}", None)
        elif e.kind == "level-high":
            on[f"level{d.get('probe')}-{d.get('level', 0)}"] = (e.severity, e.message)
        elif e.kind == "level-normal":
            on.pop(f"level{d.get('probe')}-{d.get('level', 0)}", None)
        elif e.kind == "recording-ended":
            on.pop("tach", None)
    return list(on.values())


def figures(snap: dict):
    """Bode (amplitude per unit and phase lag against speed) and polar figures of the
    live 1X, the polar turned with the machine's rotation; a message instead of empty
    axes when nothing has been recorded."""
    from rundash.figures import live_bode_polar

    if snap.get("run_id") is None:
        msg = "No run is being recorded: start one with rundash record"
    else:
        msg = f"Run {snap['run_id']}: no 1X vectors recorded yet"
    return live_bode_polar(snap.get("tracks", []), snap.get("bands", []),
                           rotation=snap.get("rotation", "ccw"), empty_message=msg)


def register_callbacks(app, db) -> None:
    from dash import Input, Output, State, html

    from rundash.presentation import display_text

    @app.callback(Output(ids.LIVE_STATUS, "children"), Output(ids.LIVE_ALERTS, "children"),
                  Output(ids.LIVE_BODE, "figure"), Output(ids.LIVE_POLAR, "figure"),
                  Output(ids.LIVE_EVENTS, "children"),
                  Input(ids.LIVE_POLL, "n_intervals"), State(ids.LIVE_RUN, "data"))
    def _poll(_n, run_id):
        snap = snapshot(db, run_id)
        if snap["run_id"] is None:
            empty = figures(snap)
            return ("No run is being recorded (start one with rundash record).",
                    [html.Span("no active warning", className="alert none")],
                    empty[0], empty[1], [])
        st = snap["status"]
        if st is None:
            status = f"run {snap['run_id']}: no live status (not recorded live)"
        else:
            speed = "-" if st.speed_rpm is None else f"{st.speed_rpm:,.0f} rpm"
            acc = "-" if st.accel_rpm_s is None else f"{st.accel_rpm_s:+,.0f} rpm/s"
            status = (f"{snap['machine']} · run {snap['run_id']} · {st.state} · "
                      f"t = {st.time_s:.1f} s · speed {speed} · acceleration {acc} · "
                      f"tach {'ok' if st.tach_ok else 'LOST'} · "
                      f"{st.n_revs} revolutions")
            silent = (datetime.now(timezone.utc) - st.updated_at).total_seconds()
            if st.state == "recording" and silent > STALE_S:
                status += (f" · no update for {silent:.0f} s: the recorder may have stopped "
                           "(the run stays incomplete and can be processed)")
        alerts = [html.Span([html.B(f"{sev}: "), display_text(text)],
                            className=f"alert {sev}", role="alert" if sev == "alarm" else None)
                  for sev, text in active_alerts(snap["events"])]
        if not alerts:
            alerts = [html.Span("no active warning", className="alert none")]
        bode, polar = figures(snap)
        rows = [html.Tr([html.Th(h) for h in ("t (s)", "speed (rpm)", "level", "event")])]
        for e in reversed(snap["events"]):
            rows.append(html.Tr([html.Td(f"{e.time_s:.1f}"),
                                 html.Td("-" if e.speed_rpm is None else f"{e.speed_rpm:,.0f}"),
                                 html.Td(e.severity), html.Td(display_text(e.message))],
                                className=f"event {e.kind}"))
        return status, alerts, bode, polar, rows
