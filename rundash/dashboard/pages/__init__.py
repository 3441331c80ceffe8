"""Dashboard pages; each module holds its route, layout and callbacks.

A page module has ``TITLE``, ``match(pathname) -> dict | None`` (the route's arguments),
``layout(db, **args)`` and ``register_callbacks(app, db)``.
"""

from __future__ import annotations

from rundash import CAUTION


def register(app, db) -> None:
    from dash import Input, Output, dcc, html

    from rundash.dashboard import ids
    from rundash.dashboard.pages import compare, importer, live, review, runs

    modules = (runs, review, importer, live, compare)
    app.layout = html.Div([
        dcc.Location(id=ids.URL),
        html.Header(className="shell-head", children=[
            html.Span("rundash", className="brand"),
            html.Nav([dcc.Link("Machines and runs", href=runs.PATH),
                      dcc.Link("Import a run", href=importer.PATH),
                      dcc.Link("Live monitor", href=live.PATH),
                      dcc.Link("Compare runs", href=compare.PATH)]),
            html.Span("start-up and coast-down review", className="muted")]),
        html.Main(id=ids.PAGE, className="shell-main"),
        html.Div(CAUTION, id=ids.CAUTION_BAR, className="caution"),
    ])

    @app.callback(Output(ids.PAGE, "children"), Input(ids.URL, "pathname"))
    def _route(pathname):
        return route(db, pathname, modules)

    for m in modules:
        m.register_callbacks(app, db)


def route(db, pathname, modules):
    """The layout for a path, or a 'not found' message naming the known pages."""
    from dash import dcc, html

    for m in modules:
        args = m.match(pathname or "/")
        if args is not None:
            return m.layout(db, **args)
    return html.Div(className="card", children=[
        html.H2("Page not found"),
        html.P([f"No page at {pathname!r}. Go to ", dcc.Link("machines and runs", href="/"),
                "."])])
