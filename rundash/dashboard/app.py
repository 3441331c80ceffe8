"""The Dash application: ``create_app(db)`` builds it, ``serve(db, host, port)`` runs it.

The app is a thin shell: a header with the page links, the page, and the caution bar
(always visible). Each page module in :mod:`rundash.dashboard.pages` holds its route,
layout and callbacks; the database handle is passed in here and nowhere else.
"""

from __future__ import annotations

import sys

from rundash.storage.engine import Database

LOOPBACK = ("127.0.0.1", "localhost", "::1")


def create_app(db: Database, *, password: str | None = None):
    """The app; with ``password`` every request needs HTTP basic auth (see security.py)."""
    import dash

    from rundash.dashboard import pages, security
    from rundash.dashboard.pages.importer import MAX_UPLOAD_BYTES
    from rundash.dashboard.theme import INDEX

    app = dash.Dash(__name__, title="rundash", suppress_callback_exceptions=True,
                    use_pages=False, update_title=None)
    app.index_string = INDEX
    security.secure(app, password=password, max_upload_bytes=MAX_UPLOAD_BYTES)
    pages.register(app, db)
    return app


def serve(db: Database, *, host: str = "127.0.0.1", port: int = 8050, debug: bool = False,
          password: str | None = None) -> int:
    """Serve on ``host``: a non-loopback host needs ``password``; debug only on loopback."""
    from rundash.dashboard import security

    security.check_serve_options(host, password=password, debug=debug)
    app = create_app(db, password=password)
    for line in security.instructions(host, port, password=password):
        print(line, file=sys.stderr)
    app.run(host=host, port=port, debug=debug)
    return 0
