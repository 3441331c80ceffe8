"""Table downloads of the run review and compare pages: the files ``rundash export`` and
``rundash compare --format`` write (:mod:`rundash.workflows.export` builds the tables and
their bytes; this module only hands them to ``dcc.Download``).

:func:`review_controls` and :func:`compare_controls` draw a row (table, format, button);
:func:`run_download` and :func:`compare_download` return the ``(download dict, status)``
pair the callbacks send; errors come back as a visible alert, one line.
"""

from __future__ import annotations

import base64
from typing import Any, Sequence

from rundash.dashboard import ids
from rundash.errors import RundashError

TABLES = (("vectors", "Vectors (per revolution)"),
          ("speed", "Speed profile"), ("findings", "Findings (critical speeds)"),
          ("limits", "Limit checks"), ("cascade", "Cascade spectra"))
FORMATS = (("csv", "CSV"), ("xlsx", "Excel (xlsx)"), ("parquet", "Parquet"))


def _row(what_id, fmt_id, button_id, download_id, status_id, tables, label):
    from dash import dcc, html

    parts = []
    if tables:
        parts.append(dcc.Dropdown(id=what_id, value=tables[0][0], clearable=False,
                                  style={"width": "300px"},
                                  options=[{"label": t, "value": v} for v, t in tables]))
    parts += [dcc.Dropdown(id=fmt_id, value="csv", clearable=False, style={"width": "150px"},
                           options=[{"label": t, "value": v} for v, t in FORMATS]),
              html.Button(label, id=button_id, n_clicks=0),
              dcc.Download(id=download_id), html.Div(id=status_id)]
    return html.Div(className="controls", style={"alignItems": "center", "marginTop": "6px"},
                    children=[html.Span("Export as a table:", className="note"), *parts])


def review_controls():
    """The review page's row: which table, which format, the button."""
    return _row(ids.EXPORT_WHAT, ids.EXPORT_FORMAT, ids.EXPORT_BUTTON, ids.EXPORT_DOWNLOAD,
                ids.EXPORT_STATUS, TABLES, "Download table")


def compare_controls():
    """The compare page's row: the comparison table in a format."""
    return _row(None, ids.COMPARE_EXPORT_FORMAT, ids.COMPARE_EXPORT_BUTTON,
                ids.COMPARE_EXPORT_DOWNLOAD, ids.COMPARE_EXPORT_STATUS, (),
                "Download the comparison")


def _sent(data: bytes, name: str, fmt: str):
    from dash import html

    from rundash.workflows.export import MIME

    return ({"content": base64.b64encode(data).decode("ascii"), "filename": name,
             "base64": True, "type": MIME[fmt]},
            html.Div(f"{name} ready ({_size(len(data))}).", className="note"))


def _size(n: int) -> str:
    return f"{n / 1e6:.1f} MB" if n >= 1e6 else f"{max(1, round(n / 1e3))} kB"


def _failed(what: str, exc: Exception):
    from dash import html

    return None, html.Div(f"The {what} could not be exported: {exc}", className="error",
                          role="alert")


def run_download(db, run_id, what: str | None, fmt: str | None):
    """(download dict or None, status) of the table ``what`` of ``run_id`` in ``fmt``."""
    from rundash.workflows.export import export_filename, run_table, table_bytes

    if run_id is None or not what or not fmt:
        return None, None
    try:
        data = table_bytes(run_table(db, int(run_id), what), fmt, sheet=what)
    except RundashError as exc:
        return _failed(f"{what} table", exc)
    return _sent(data, export_filename(int(run_id), what, fmt), fmt)


def compare_download(db, run_ids: Sequence[int] | None, fmt: str | None, *, cache=None):
    """(download dict or None, status) of the comparison of ``run_ids`` (the page's own,
    kept in the result cache) in ``fmt``."""
    from dash import html

    from rundash.dashboard.pages.compare import comparison_of
    from rundash.workflows.export import comparison_table, export_filename, table_bytes

    if not fmt:
        return None, None
    if not run_ids or len(run_ids) < 2:
        return None, html.Div("Tick two or more processed runs to export a comparison.",
                              className="warn")
    try:
        c: dict[str, Any] = comparison_of(db, run_ids, cache=cache)
        data = table_bytes(comparison_table(c), fmt, sheet="comparison")
    except RundashError as exc:
        return _failed("comparison", exc)
    order = [r["id"] for r in c["runs"]]
    return _sent(data, export_filename("-".join(str(i) for i in order), "compare", fmt), fmt)


def register_callbacks(app, db) -> None:
    from dash import Input, Output, State

    from rundash.dashboard.cache import cache_of

    cache = cache_of(app, db)

    @app.callback(Output(ids.EXPORT_DOWNLOAD, "data"), Output(ids.EXPORT_STATUS, "children"),
                  Input(ids.EXPORT_BUTTON, "n_clicks"), State(ids.RUN_ID, "data"),
                  State(ids.EXPORT_WHAT, "value"), State(ids.EXPORT_FORMAT, "value"),
                  prevent_initial_call=True,
                  running=[(Output(ids.EXPORT_BUTTON, "disabled"), True, False)])
    def _run(_clicks, run_id, what, fmt):
        return run_download(db, run_id, what, fmt)

    @app.callback(Output(ids.COMPARE_EXPORT_DOWNLOAD, "data"),
                  Output(ids.COMPARE_EXPORT_STATUS, "children"),
                  Input(ids.COMPARE_EXPORT_BUTTON, "n_clicks"), State(ids.COMPARE_RUNS, "value"),
                  State(ids.COMPARE_EXPORT_FORMAT, "value"), prevent_initial_call=True,
                  running=[(Output(ids.COMPARE_EXPORT_BUTTON, "disabled"), True, False)])
    def _compare(_clicks, run_ids, fmt):
        return compare_download(db, run_ids, fmt, cache=cache)
