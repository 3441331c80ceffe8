"""Run review, housekeeping: edit the run's label, cycle, notes, kind, test kind (field,
shop test, trip test: the rules in scope) and start time;
delete the run (a tick to confirm, a second one when the run was signed off). The same
functions as ``rundash edit`` and ``rundash delete``."""

from __future__ import annotations

from datetime import datetime, timezone

from rundash.dashboard import ids
from rundash.errors import RundashError

KINDS = ("run-up", "coast-down", "mixed", "steady")
TEST_KIND_LABELS = {"field": "field run", "shop-test": "shop test (mechanical running test)",
                    "trip-test": "overspeed trip test"}
CONFIRM = "confirm"
SIGNED_TOO = "signed-off-too"


def housekeeping_card(run, signed: bool):
    from dash import dcc, html

    started = run.started_at.strftime("%Y-%m-%dT%H:%M:%SZ") if run.started_at else ""
    box = [{"label": f"I confirm deleting run {run.id} with its waveforms, results and "
                     "review records", "value": CONFIRM}]
    if signed:
        box.append({"label": "this run was signed off: delete the signed record too",
                    "value": SIGNED_TOO})
    field = {"type": "text", "style": {"width": "220px"}}
    return html.Details(className="card", id="run-housekeeping", children=[
        html.Summary("Edit or delete this run"),
        html.Div(className="controls", children=[
            html.Div([html.Label("Your name (kept with the change)", className="head"),
                      dcc.Input(id=ids.RUN_EDIT_BY, **field)]),
            html.Div([html.Label("Label", className="head"),
                      dcc.Input(id=ids.RUN_EDIT_LABEL, value=run.label, **field)]),
            html.Div([html.Label("Cycle", className="head"),
                      dcc.Input(id=ids.RUN_EDIT_CYCLE, value=run.cycle, **field)]),
            html.Div([html.Label("Notes", className="head"),
                      dcc.Input(id=ids.RUN_EDIT_NOTES, value=run.notes, **field)]),
            html.Div([html.Label("Kind", className="head"),
                      dcc.Dropdown(id=ids.RUN_EDIT_KIND, options=list(KINDS), value=run.kind,
                                   clearable=False, style={"width": "160px"})]),
            html.Div([html.Label("Test kind", className="head"),
                      dcc.Dropdown(id=ids.RUN_EDIT_TEST_KIND,
                                   options=[{"label": v, "value": k}
                                            for k, v in TEST_KIND_LABELS.items()],
                                   value=getattr(run, "test_kind", "field") or "field",
                                   clearable=False, style={"width": "280px"})]),
            html.Div([html.Label("Start (UTC, ISO 8601)", className="head"),
                      dcc.Input(id=ids.RUN_EDIT_STARTED, value=started, **field)]),
            html.Button("Save changes", id=ids.RUN_EDIT_SAVE, n_clicks=0)]),
        html.P("Changes are kept in the run's review log with the name given here.",
               className="note"),
        dcc.Checklist(id=ids.RUN_DELETE_CONFIRM, options=box, value=[],
                      inputStyle={"marginRight": "6px"}),
        html.Button("Delete this run", id=ids.RUN_DELETE, n_clicks=0, className="danger"),
        html.Div(id=ids.RUN_HOUSEKEEPING_MESSAGE, role="status")])


def _time(text: str | None):
    if not text:
        return None
    try:
        t = datetime.fromisoformat(text.strip().replace("Z", "+00:00"))
    except ValueError:
        raise ValueError(f"start time {text!r}: allowed ISO 8601 with its zone, such as "
                         "2026-05-01T06:00:00Z") from None
    if t.tzinfo is None:
        raise ValueError(f"start time {text!r}: give its zone (Z or +hh:mm)")
    return t.astimezone(timezone.utc)


def save(db, run_id: int, *, by: str, label, cycle, notes, kind, started,
         test_kind=None) -> str:
    from rundash.workflows.housekeeping import REPROCESS_NOTE, edit_run

    more = {} if test_kind is None else {"test_kind": test_kind}
    try:
        diff = edit_run(db, run_id, by=by or "", label=label or "", cycle=cycle or "",
                        notes=notes or "", kind=kind, started_at=_time(started), **more)
    except (RundashError, ValueError) as exc:
        return f"Not saved: {exc}"
    if not diff:
        return "Nothing changed."
    msg = "Saved: " + ", ".join(sorted(diff)) + " (kept in the review log)."
    if "test_kind" in diff:
        old = TEST_KIND_LABELS.get(diff["test_kind"][0], diff["test_kind"][0])
        msg += f" Note: {REPROCESS_NOTE.format(old=old)} (rundash process {run_id})."
    return msg


def delete(db, run_id: int, ticks) -> tuple[str, bool]:
    from rundash.workflows.housekeeping import delete_run

    ticks = set(ticks or [])
    try:
        counts = delete_run(db, run_id, confirm=CONFIRM in ticks,
                            signed_off_too=SIGNED_TOO in ticks)
    except RundashError as exc:
        msg = str(exc).replace("--yes on the command line", "tick the confirmation").replace(
            "--signed-off-too on the command line", "tick the second box")
        return f"Not deleted: {msg}", False
    n = sum(counts.values())
    return f"Run {run_id} deleted ({n} rows).", True


def register_callbacks(app, db) -> None:
    from dash import Input, Output, State, ctx, dcc, html

    @app.callback(Output(ids.RUN_HOUSEKEEPING_MESSAGE, "children"),
                  Input(ids.RUN_EDIT_SAVE, "n_clicks"), Input(ids.RUN_DELETE, "n_clicks"),
                  State(ids.RUN_ID, "data"), State(ids.RUN_EDIT_BY, "value"),
                  State(ids.RUN_EDIT_LABEL, "value"), State(ids.RUN_EDIT_CYCLE, "value"),
                  State(ids.RUN_EDIT_NOTES, "value"), State(ids.RUN_EDIT_KIND, "value"),
                  State(ids.RUN_EDIT_STARTED, "value"), State(ids.RUN_DELETE_CONFIRM, "value"),
                  State(ids.RUN_EDIT_TEST_KIND, "value"),
                  prevent_initial_call=True)
    def _housekeeping(_save, _delete, run_id, by, label, cycle, notes, kind, started, ticks,
                      test_kind):
        if ctx.triggered_id == ids.RUN_DELETE:
            msg, done = delete(db, run_id, ticks)
            return [msg, " ", dcc.Link("Back to the runs", href="/")] if done else msg
        return html.Span(save(db, run_id, by=by, label=label, cycle=cycle, notes=notes,
                              kind=kind, started=started, test_kind=test_kind))
