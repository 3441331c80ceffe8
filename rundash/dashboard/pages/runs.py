"""Machines and their runs, newest first."""

from __future__ import annotations

from rundash import CAUTION


def layout(db):
    from dash import html

    from rundash.storage import queries as q

    with db.read() as conn:
        runs = q.list_runs(conn)
    header = html.Tr([html.Th(h) for h in ("Run", "Machine", "Kind", "Started (UTC)", "Cycle",
                                           "Label", "State", "Verdict")])
    rows = [html.Tr([html.Td(str(r.id)), html.Td(r.machine_name), html.Td(r.kind),
                     html.Td(r.started_at.strftime("%Y-%m-%d %H:%M") if r.started_at else "-"),
                     html.Td(r.cycle or "-"), html.Td(r.label), html.Td(r.state),
                     html.Td(r.verdict or ("processed" if r.processed else "not processed"))])
            for r in runs]
    return html.Div([html.H2("Runs"), html.Table([header, *rows], id="runs-table"),
                     html.P(CAUTION, className="caution")])
