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
        dcc.Store(id=ids.PAGE_TITLE), dcc.Store(id=ids.PAGE_TITLE_SHOWN),
        html.Div(CAUTION, id=ids.CAUTION_BAR, className="caution"),
    ])

    @app.callback(Output(ids.PAGE, "children"), Output(ids.PAGE_TITLE, "data"),
                  Input(ids.URL, "pathname"))
    def _route(pathname):
        return route(db, pathname, modules), page_title(pathname, modules)

    # the browser tab names the page (Dash's own title stays "rundash" until this runs)
    app.clientside_callback("function(t) { if (t) { document.title = t; } return t; }",
                            Output(ids.PAGE_TITLE_SHOWN, "data"),
                            Input(ids.PAGE_TITLE, "data"), prevent_initial_call=True)

    for m in modules:
        m.register_callbacks(app, db)


def page_title(pathname, modules) -> str:
    """The browser tab's title: the page's name, the run or machine it shows, 'rundash'."""
    for m in modules:
        args = m.match(pathname or "/")
        if args is not None:
            what = [f"run {args['run_id']}"] if args.get("run_id") is not None else []
            if args.get("machine_id") is not None:
                what.append(f"machine {args['machine_id']}")
            if args.get("run_ids"):
                what.append("runs " + ", ".join(str(r) for r in args["run_ids"]))
            return " · ".join([m.TITLE, *what, "rundash"])
    return "Page not found · rundash"


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
