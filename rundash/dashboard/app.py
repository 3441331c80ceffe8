"""The Dash application: ``create_app(db)`` builds it, ``serve(db, host, port)`` runs it.

``serve`` runs the app in waitress (a pure-Python production WSGI server) on every
address; only ``--debug`` (loopback only) uses Flask's development server, for its
reloader and in-browser tracebacks.

The app is a thin shell: a header with the page links, the page, and the caution bar
(always visible). Each page module in :mod:`rundash.dashboard.pages` holds its route,
layout and callbacks; the database handle is passed in here and nowhere else.
"""

from __future__ import annotations

import sys

from rundash.storage.engine import Database

LOOPBACK = ("127.0.0.1", "localhost", "::1")


def create_app(db: Database, *, password: str | None = None, local_files: bool = False):
    """The app; with ``password`` every request needs HTTP basic auth (see security.py).

    ``local_files``: the import page may import a file already on this computer by its
    path (no upload, no size cap): only for a server bound to the loopback, and then only
    for requests from the loopback (:func:`rundash.dashboard.pages.importer.local_files_allowed`).
    """
    import dash

    from rundash.dashboard import pages, security
    from rundash.dashboard.pages.importer import MAX_UPLOAD_BYTES
    from rundash.dashboard.theme import INDEX

    app = dash.Dash(__name__, title="rundash", suppress_callback_exceptions=True,
                    use_pages=False, update_title=None)
    app.index_string = INDEX
    security.secure(app, password=password, max_upload_bytes=MAX_UPLOAD_BYTES)
    app.server.config["RUNDASH_LOCAL_FILES"] = bool(local_files)
    pages.register(app, db)
    return app


def serve(db: Database, *, host: str = "127.0.0.1", port: int = 8050, debug: bool = False,
          password: str | None = None) -> int:
    """Serve on ``host``: a non-loopback host needs ``password``; debug only on loopback."""
    from rundash.dashboard import security

    security.check_serve_options(host, password=password, debug=debug)
    app = create_app(db, password=password, local_files=security.is_loopback(host))
    for line in security.instructions(host, port, password=password):
        print(line, file=sys.stderr)
    if debug:
        app.run(host=host, port=port, debug=True)
        return 0
    wsgi_server(app.server, host=host, port=port).run()
    return 0


def wsgi_server(wsgi_app, *, host: str, port: int, threads: int = 8):
    """A waitress server for ``wsgi_app`` bound to ``host:port`` (``.run()`` serves until
    Ctrl-C, ``.close()`` stops it). Port 0 picks a free port (``.effective_port``).

    Request bodies are capped at the app's ``MAX_CONTENT_LENGTH`` (see security.py) by
    waitress as well, so an oversized upload is refused before it is buffered.
    """
    from waitress.server import create_server

    cap = getattr(wsgi_app, "config", {}).get("MAX_CONTENT_LENGTH")
    options = {"max_request_body_size": cap} if cap else {}
    return create_server(wsgi_app, host=host.strip("[]"), port=port, threads=threads,
                         ident="rundash", clear_untrusted_proxy_headers=True, **options)
