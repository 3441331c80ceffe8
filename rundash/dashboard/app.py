"""The Dash application: ``create_app(db)`` builds it, ``serve(db, host, port)`` runs it."""

from __future__ import annotations

import sys

from rundash.storage.engine import Database

LOOPBACK = ("127.0.0.1", "localhost", "::1")


def create_app(db: Database):
    import dash

    from rundash.dashboard import pages

    app = dash.Dash(__name__, title="rundash", suppress_callback_exceptions=True,
                    use_pages=False)
    pages.register(app, db)
    return app


def serve(db: Database, *, host: str = "127.0.0.1", port: int = 8050, debug: bool = False) -> int:
    app = create_app(db)
    url = f"http://{'[' + host + ']' if ':' in host else host}:{port}/"
    print(f"rundash dashboard on {url} (Ctrl-C stops it)", file=sys.stderr)
    app.run(host=host, port=port, debug=debug)
    return 0
