"""Machines and their runs, newest first: what was recorded, is it processed, how did it go."""

from __future__ import annotations

from rundash.dashboard import ids

PATH = "/"
TITLE = "Machines and runs"

VERDICT_WORDS = {"pass": "pass", "fail": "fail", "attention": "attention",
                 "not judged": "not judged"}


def match(pathname: str):
    return {} if pathname in ("/", "", "/runs") else None


def verdict_badge(verdict: str | None, processed: bool, *, big: bool = False):
    """A verdict in words with its colour (colour never carries the meaning alone)."""
    from dash import html

    if not processed:
        text, cls = "not processed", "unjudged"
    elif verdict is None:
        text, cls = "no findings yet", "unjudged"
    else:
        text, cls = VERDICT_WORDS.get(verdict, str(verdict)), verdict.replace(" ", "-")
    return html.Span(text, className=f"badge {cls}{' big' if big else ''}")


def machine_rows(db):
    """(MachineInfo, [RunInfo newest first]) for every machine, machines by name."""
    from rundash.storage import queries as q

    with db.read() as conn:
        machines = q.list_machines(conn)
        return [(m, q.list_runs(conn, m.id)) for m in machines]


def layout(db):
    from dash import dcc, html

    from rundash.workflows.review import review_states

    groups = machine_rows(db)
    review = review_states(db, [r for _, runs in groups for r in runs])
    if not groups:
        return html.Div(className="card", children=[
            html.H2("No machines yet"),
            html.P(["Import a run with its machine description on the ",
                    dcc.Link("import page", href="/import"), ", or build the demo with "
                    "the command line (rundash demo)."])])
    cards = []
    for m, runs in groups:
        s = m.spec
        speeds = (f"operating {s.min_operating_speed_rpm:,.0f}–{s.max_continuous_speed_rpm:,.0f}"
                  f" rpm, rated {s.rated_speed_rpm:,.0f} rpm"
                  + (f", trip {s.trip_speed_rpm:,.0f} rpm" if s.trip_speed_rpm else ""))
        head = html.Tr([html.Th(h) for h in ("Started (UTC)", "Kind", "Run", "Cycle",
                                            "Processing", "Verdict", "Review", "")])
        rows = []
        for r in runs:
            state = r.state if r.state != "complete" else (
                "processed" if r.processed else "imported, not processed")
            rows.append(html.Tr([
                html.Td(r.started_at.strftime("%Y-%m-%d %H:%M") if r.started_at else "–"),
                html.Td(r.kind),
                html.Td([dcc.Link(r.label or r.source_name, href=f"/run/{r.id}"),
                         html.Div(f"run {r.id} · {r.source_name} · {r.duration_s:.0f} s · "
                                  f"{r.n_channels} channels", className="note")]),
                html.Td(r.cycle or "–"),
                html.Td(state),
                html.Td(verdict_badge(r.verdict, r.processed)),
                html.Td(review[r.id], className="review-state",
                        **{"data-run": str(r.id)}),
                html.Td(dcc.Link("review", href=f"/run/{r.id}")),
            ]))
        body = (html.Table([html.Thead(head), html.Tbody(rows)], className="plain")
                if rows else html.P("No runs yet.", className="muted"))
        cards.append(html.Div(className="card", children=[
            html.H2(s.name),
            html.P(f"{s.kind.replace('_', ' ')} · {speeds} · guidance profile {s.profile} · "
                   f"{len(m.probes)} probes · rotation {s.rotation} (from the driver end)",
                   className="muted"),
            body,
            html.P(dcc.Link("Compare runs of this machine →", href=f"/compare/machine/{m.id}"),
                   className="note") if len(runs) > 1 else None]))
    return html.Div(id=ids.RUNS_TABLE, children=[html.H1(TITLE, style={"fontSize": "22px"}),
                                                  *cards])


def register_callbacks(app, db) -> None:
    """This page has no callbacks: it is drawn from the database when opened."""
