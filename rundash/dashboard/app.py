"""The Dash application: ``create_app(db)`` builds it, ``serve(db, host, port)`` runs it.

The app is a thin shell: a header with the page links, the page, and the caution bar
(always visible). Each page module in :mod:`rundash.dashboard.pages` holds its route,
layout and callbacks; the database handle is passed in here and nowhere else.
"""

from __future__ import annotations

import sys

from rundash.storage.engine import Database

LOOPBACK = ("127.0.0.1", "localhost", "::1")


def create_app(db: Database):
    import dash

    from rundash.dashboard import pages
    from rundash.dashboard.theme import INDEX

    app = dash.Dash(__name__, title="rundash", suppress_callback_exceptions=True,
                    use_pages=False, update_title=None)
    app.index_string = INDEX
    pages.register(app, db)
    return app


def serve(db: Database, *, host: str = "127.0.0.1", port: int = 8050, debug: bool = False) -> int:
    app = create_app(db)
    url = f"http://{'[' + host + ']' if ':' in host else host}:{port}/"
    print(f"rundash dashboard on {url} (Ctrl-C stops it)", file=sys.stderr)
    app.run(host=host, port=port, debug=debug)
    return 0
