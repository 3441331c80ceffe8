"""Dashboard pages; each module holds its route, layout and callbacks."""

from __future__ import annotations


def register(app, db) -> None:
    from dash import dcc, html
    from dash.dependencies import Input, Output

    from rundash.dashboard.pages import runs

    app.layout = html.Div([dcc.Location(id="url"), html.Div(id="page")])

    @app.callback(Output("page", "children"), Input("url", "pathname"))
    def _route(pathname):
        return runs.layout(db)
