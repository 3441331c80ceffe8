"""Report downloads and the comparison link of the run review page.

:func:`run_actions` draws the row of actions under the review page's header (the
reviewer's fields printed in the sign-off block, whether to include the comparison with
the previous processed run of the same kind on the same machine — as ``rundash report
--compare`` does —, download the report as HTML or PDF, compare with other runs);
:func:`build_report` writes the report with :func:`rundash.report.write_report` into a
throw-away folder and returns it as the dict ``dcc.Download`` takes;
:func:`register_callbacks` wires the buttons. Errors (run not processed, no Chromium or
no PDF extra for the PDF) come back as a visible alert, one line.
"""

from __future__ import annotations

import base64
import tempfile
from pathlib import Path
from typing import Any, Literal

from rundash.dashboard import ids
from rundash.errors import InputError, RundashError

ReportFormat = Literal["html", "pdf"]
MIME = {"html": "text/html", "pdf": "application/pdf"}
DECISIONS = ("accepted", "accepted with remarks", "not accepted")


def report_filename(run, fmt: ReportFormat) -> str:
    """``rundash-run-<id>-<start date>.<fmt>``: a name that sorts and says which run."""
    day = run.started_at.strftime("%Y-%m-%d") if run.started_at else "undated"
    return f"rundash-run-{run.id}-{day}.{fmt}"


def build_report(db, run_id: int, fmt: ReportFormat, *, reviewer: str = "", role: str = "",
                 decision: str = "", remarks: str = "",
                 compare: tuple[int, ...] = ()) -> dict[str, Any]:
    """The sign-off report of ``run_id`` as a ``dcc.Download`` dict (base64 content),
    with the reviewer's fields in the sign-off block and the comparison with ``compare``.

    Raises
    ------
    InputError
        ``fmt`` is neither ``'html'`` nor ``'pdf'``.
    RundashError
        Whatever :func:`rundash.report.write_report` raises (run not processed, no
        Chromium for the PDF, ...).
    """
    from rundash.report import write_report
    from rundash.storage import queries as q

    if fmt not in MIME:
        raise InputError(f"Invalid value for 'format': allowed 'html', 'pdf', got {fmt!r}")
    with db.read() as conn:
        run = q.get_run(conn, int(run_id))
    name = report_filename(run, fmt)
    with tempfile.TemporaryDirectory(prefix="rundash-dl-") as tmp:
        out = write_report(db, int(run_id), Path(tmp) / name, compare=compare,
                           reviewer=reviewer, role=role, decision=decision, remarks=remarks)
        content = out.read_bytes()
    return {"content": base64.b64encode(content).decode("ascii"), "filename": name,
            "base64": True, "type": MIME[fmt]}


def compare_href(db, run) -> str:
    """The compare page with this run and the earliest other processed run of its kind
    (of any kind when there is none) ticked; just this run when it is the only one."""
    from rundash.dashboard.pages.compare import href
    from rundash.storage import queries as q

    with db.read() as conn:
        runs = q.list_runs(conn, q.run_machine_id(conn, run.id))
    others = [r for r in reversed(runs) if r.processed and r.id != run.id]
    same = [r for r in others if r.kind == run.kind]
    pick = (same or others)[:1]
    return href([run.id, *[r.id for r in pick]])


def previous_same_kind(db, run):
    """The processed run of the same machine and kind that started last before ``run``
    (by start time, then by id; undated runs count as older than dated ones), or None."""
    from rundash.storage import queries as q

    with db.read() as conn:
        runs = q.list_runs(conn, q.run_machine_id(conn, run.id))  # newest first
    ids_ = [r.id for r in runs]
    older = runs[ids_.index(run.id) + 1:] if run.id in ids_ else []
    return next((r for r in older if r.processed and r.kind == run.kind), None)


def _field(label: str, component, width: str = "180px"):
    from dash import html

    return html.Div(style={"minWidth": width}, children=[
        html.Label(label, className="head", htmlFor=component.id), component])


def report_form(db, run):
    """The reviewer's fields and the comparison choice printed into the report."""
    from dash import dcc, html

    prev = previous_same_kind(db, run)
    if prev is None:
        cmp = html.Span(f"No earlier processed {run.kind} of this machine to compare with.",
                        className="note", id=ids.REPORT_COMPARE_NOTE)
        choice = dcc.Checklist(id=ids.REPORT_COMPARE, options=[], value=[])
    else:
        day = prev.started_at.strftime("%Y-%m-%d") if prev.started_at else "undated"
        name = f"run {prev.id} ({day}{', ' + prev.label if prev.label else ''})"
        cmp = html.Span(f"with the previous {run.kind} of this machine: {name}",
                        id=ids.REPORT_COMPARE_NOTE)
        choice = dcc.Checklist(id=ids.REPORT_COMPARE, value=[prev.id], inline=True,
                               options=[{"label": " include the comparison", "value": prev.id}])
    return html.Div(className="controls", style={"marginTop": "6px"}, children=[
        _field("Reviewer", dcc.Input(id=ids.REPORT_REVIEWER, type="text", value="",
                                     placeholder="name", debounce=False)),
        _field("Role", dcc.Input(id=ids.REPORT_ROLE, type="text", value="",
                                 placeholder="e.g. rotating equipment engineer")),
        _field("Decision", dcc.Dropdown(id=ids.REPORT_DECISION, clearable=True,
                                        placeholder="blank: fill in by hand",
                                        options=[{"label": d, "value": d} for d in DECISIONS]),
               width="210px"),
        _field("Remarks", dcc.Textarea(id=ids.REPORT_REMARKS, value="",
                                       style={"width": "340px", "height": "36px"})),
        html.Div(style={"display": "flex", "gap": "6px", "alignItems": "baseline"},
                 children=[choice, cmp])])


def _fields_note(sign_off):
    from dash import html

    if not sign_off:
        return html.P("The fields below are printed in the report's sign-off block (a "
                      "record, not an electronic signature); leave them blank to fill in on "
                      "paper.", className="note", style={"margin": "0"},
                      id=ids.REPORT_FIELDS_NOTE)
    return html.P(f"This run has a stored sign-off ({sign_off.get('name') or '–'}, "
                  f"{sign_off.get('signed_on') or '–'}, {sign_off.get('decision') or '–'}): "
                  "the report prints that record, and the fields below are not used (the "
                  "report says so when they are filled in).", className="warn",
                  style={"margin": "0"}, id=ids.REPORT_FIELDS_NOTE)


def run_actions(db, run, processed: bool, review=None):
    """The actions row: the reviewer's fields and report downloads (when processed) and
    the comparison link. With a stored sign-off in ``review`` (the run's review object)
    the report prints that record, and the note over the fields says they are not used."""
    from dash import dcc, html

    link = dcc.Link("Compare with other runs of this machine →", href=compare_href(db, run))
    if not processed:
        return html.Div(className="controls", children=[
            html.Span("The report can be downloaded once the run is processed.",
                      className="note"), link])
    return html.Div([
        html.H3("Sign-off report", style={"margin": "10px 0 2px 0", "fontSize": "15px"}),
        _fields_note((review or {}).get("sign_off")),
        report_form(db, run),
        html.Div(className="controls", style={"alignItems": "center", "marginTop": "6px"},
                 children=[
            html.Button("Download report (HTML)", id=ids.REPORT_HTML, n_clicks=0),
            html.Button("Download report (PDF)", id=ids.REPORT_PDF, n_clicks=0,
                        title="Printed by headless Chromium; takes a few seconds"),
            dcc.Download(id=ids.REPORT_DOWNLOAD),
            html.Span(id=ids.REPORT_BUSY, className="note", role="status"),
            html.Div(id=ids.REPORT_STATUS),
            link])])


def download(db, run_id, trigger: str | None, *, reviewer: str | None = "",
             role: str | None = "", decision: str | None = "", remarks: str | None = "",
             compare=()):
    """(download dict or None, status component) for a click on one of the buttons."""
    from dash import html

    fmt = {ids.REPORT_HTML: "html", ids.REPORT_PDF: "pdf"}.get(trigger or "")
    if fmt is None or run_id is None:
        return None, None
    try:
        data = build_report(db, int(run_id), fmt, reviewer=(reviewer or "").strip(),
                            role=(role or "").strip(), decision=decision or "",
                            remarks=(remarks or "").strip(),
                            compare=tuple(int(c) for c in compare or ()))
    except RundashError as exc:
        return None, html.Div(f"The {fmt.upper()} report could not be made: {exc}",
                              className="error", role="alert", id=ids.REPORT_ALERT)
    size = len(base64.b64decode(data["content"]))
    return data, html.Div(f"{data['filename']} ready ({size / 1e6:.1f} MB).", className="note")


def register_callbacks(app, db) -> None:
    from dash import Input, Output, State, ctx

    @app.callback(Output(ids.REPORT_DOWNLOAD, "data"), Output(ids.REPORT_STATUS, "children"),
                  Input(ids.REPORT_HTML, "n_clicks"), Input(ids.REPORT_PDF, "n_clicks"),
                  State(ids.RUN_ID, "data"), State(ids.REPORT_REVIEWER, "value"),
                  State(ids.REPORT_ROLE, "value"), State(ids.REPORT_DECISION, "value"),
                  State(ids.REPORT_REMARKS, "value"), State(ids.REPORT_COMPARE, "value"),
                  prevent_initial_call=True,
                  running=[(Output(ids.REPORT_HTML, "disabled"), True, False),
                           (Output(ids.REPORT_PDF, "disabled"), True, False),
                           (Output(ids.REPORT_BUSY, "children"),
                            "Building the report (the PDF takes a few seconds)…", "")])
    def _download(_html_clicks, _pdf_clicks, run_id, reviewer, role, decision, remarks,
                  compare):
        return download(db, run_id, ctx.triggered_id, reviewer=reviewer, role=role,
                        decision=decision, remarks=remarks, compare=compare)
