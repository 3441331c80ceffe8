"""Run comparison: overlaid Bode and polar plots of chosen runs of one machine, the trend
of critical speed and AF across runs and overhaul cycles with their uncertainties, and
the table of what changed (:func:`rundash.workflows.comparison.compare_runs`).

Routes: ``/compare`` (the first machine), ``/compare/machine/<id>`` and
``/compare/<run>,<run>,...`` (those runs ticked, their machine shown).

The earliest chosen run (by start time) is the reference, so shifts read forward in
time. The bootstrap runs with :data:`N_BOOT` replicates; each comparison is kept in the
app's result cache under the runs and their processing times, so a re-processed run is
compared anew. The page's callback compares the probe shown first (its results are those
of the whole comparison) and then the whole comparison in the background
(:class:`Background`), which the other probes' fold, another probe and the export read.
Callbacks are thin: tests call :func:`overlay_figures`, :func:`comparison_view` and
:func:`selection_note` directly.
"""

from __future__ import annotations

import re
import threading
from datetime import datetime, timezone
from typing import Any, Sequence

from rundash import CAUTION, figures
from rundash.dashboard import exports, ids
from rundash.dashboard.folds import EAGER_ROWS
from rundash.errors import NotFoundError, RundashError
from rundash.presentation import operating_range

PATH = "/compare"
TITLE = "Compare runs"
#: Bootstrap replicates of the page's comparison (the CLI and report default to 100).
N_BOOT = 30
_ROUTE = re.compile(r"^/compare(?:/(?:machine/(?P<machine>\d+)|(?P<runs>\d+(?:,\d+)*)))?/?$")
_FAR = datetime.max.replace(tzinfo=timezone.utc)


def match(pathname: str):
    m = _ROUTE.match(pathname or "")
    if not m:
        return None
    if m.group("machine"):
        return {"machine_id": int(m.group("machine"))}
    if m.group("runs"):
        return {"run_ids": [int(x) for x in m.group("runs").split(",")]}
    return {}


def href(run_ids: Sequence[int] = ()) -> str:
    """The page's address with ``run_ids`` ticked."""
    return PATH + ("/" + ",".join(str(int(r)) for r in run_ids) if run_ids else "")


def _cache(db, cache):
    from rundash.dashboard.cache import ResultCache

    return cache if cache is not None else ResultCache(db, maxsize=0)


# ----------------------------------------------------------------------------- reading
def machine_runs(db, machine_id: int | None = None, run_ids: Sequence[int] = ()):
    """(machines, chosen MachineInfo, its runs newest first): the machine is ``machine_id``,
    else that of the first of ``run_ids``, else the first machine by name."""
    from rundash.storage import queries as q

    with db.read() as conn:
        machines = q.list_machines(conn)
        if machine_id is None and run_ids:
            machine_id = q.run_machine_id(conn, int(run_ids[0]))
        chosen = next((m for m in machines if m.id == machine_id), None) if machine_id \
            is not None else (machines[0] if machines else None)
        if machine_id is not None and chosen is None:
            raise NotFoundError(f"there is no machine {machine_id}")
        runs = q.list_runs(conn, chosen.id) if chosen is not None else []
    return machines, chosen, runs


def run_options(runs) -> list[dict[str, Any]]:
    """Checklist options, in the order given (newest first): date, kind, cycle, label."""
    out = []
    for r in runs:
        when = r.started_at.strftime("%Y-%m-%d %H:%M") if r.started_at else "no start time"
        text = f"run {r.id} · {when} · {r.kind} · cycle {r.cycle or '–'} · " \
               f"{r.label or r.source_name}"
        out.append({"label": text + ("" if r.processed else " (not processed)"),
                    "value": r.id, "disabled": not r.processed})
    return out


def _ordered(db, run_ids: Sequence[int], cache=None) -> list:
    """The chosen runs' contexts, earliest start first (the reference first)."""
    src = _cache(db, cache)
    ctxs = [src.context(int(r)) for r in dict.fromkeys(int(r) for r in run_ids or [])]
    ctxs.sort(key=lambda c: (c["run"].started_at or _FAR, c["run"].id))
    return ctxs


def _probe_kind(ctxs, probe: str) -> str:
    for c in ctxs:
        for ch in c["channels"]:
            if ch.probe_name == probe:
                return ch.kind
    return "proximity"


def selection_note(db, run_ids: Sequence[int], *, cache=None) -> list[str]:
    """Plain sentences about the chosen runs: too few, mixed directions, mixed machines."""
    ids_ = list(dict.fromkeys(int(r) for r in run_ids or []))
    if len(ids_) < 2:
        return ["Tick two or more processed runs to compare them."]
    ctxs = _ordered(db, ids_, cache)
    notes = []
    if len({c["machine"].id for c in ctxs}) > 1:
        notes.append("The runs belong to different machines: only runs of one machine can "
                     "be compared.")
    kinds = {c["run"].kind for c in ctxs}
    if len(kinds) > 1:
        notes.append(f"Runs of different directions are overlaid ({', '.join(sorted(kinds))})."
                     " Compare like with like: the sweep moves the apparent peak in its own "
                     "direction (F. M. Lewis, 1932), so a run-up and a coast-down differ even "
                     "when the machine has not changed. The table compares run-up with run-up "
                     "and coast-down with coast-down where both runs have one.")
    return notes


# ----------------------------------------------------------------------------- figures
def overlay_figures(db, run_ids: Sequence[int], probe: str, system: str = "metric", *,
                    cache=None):
    """Overlaid 1X Bode and polar plots of ``probe`` for the chosen runs.

    One colour per run (the theme's palette, in reference-first order), run direction by
    line dash; vectors as the findings use them (slow-roll compensated where stored).
    """
    from rundash.dashboard.pages.review import vector_traces

    src = _cache(db, cache)
    ctxs = _ordered(db, run_ids, src)
    traces = []
    for k, c in enumerate(ctxs):
        if c["processing"] is None:
            continue
        rid = c["run"].id
        pieces, _ = vector_traces(db, rid, probe, [1.0], True, cache=src, ctx=c)
        color = figures.PALETTE[k % len(figures.PALETTE)]
        for p in pieces:
            if p["direction"] == "steady" or len(p["speed_rpm"]) < 3:
                continue
            traces.append(dict(p, probe=f"run {rid}", color=color))
    kind = _probe_kind(ctxs, probe)
    comp = any(t.get("compensated") for t in traces)
    word = "slow-roll compensated" if comp else "uncompensated"
    machine = ctxs[0]["machine"] if ctxs else None
    op = operating_range(machine.spec) if machine is not None else None
    uirev = f"compare-{probe}-{system}-{','.join(str(c['run'].id) for c in ctxs)}"
    bode = figures.bode(traces, kind=kind, system=system, operating=op, compensated=comp,
                        uirevision=uirev, title=f"Bode plots across runs, {probe} 1X ({word})")
    polar = figures.polar(traces, kind=kind, system=system,
                          rotation=machine.spec.rotation if machine else "ccw",
                          uirevision=uirev, title=f"Polar plots across runs, {probe} 1X ({word})")
    return bode, polar


# ----------------------------------------------------------------------------- comparison
def comparison_of(db, run_ids: Sequence[int], *, cache=None, n_boot: int = N_BOOT,
                  probe: str | None = None) -> dict[str, Any]:
    """The comparison of the chosen runs (earliest first), cached per runs and their
    processing times. With ``probe``: the whole comparison when it is cached, else that
    probe's alone (:func:`rundash.workflows.comparison.compare_runs` ``probes``; cached
    on its own)."""
    return _comparison(db, run_ids, cache, n_boot, probe)[0]


def _comparison(db, run_ids, cache, n_boot, probe):
    """(comparison, whether it is ``probe``'s alone) for :func:`comparison_of`."""
    from rundash.workflows.comparison import compare_runs

    src = _cache(db, cache)
    ctxs = _ordered(db, run_ids, src)
    ordered = [c["run"].id for c in ctxs]
    key = ("comparison", int(n_boot), *(c["key"] for c in ctxs))
    if probe is None:
        return src._get(key, lambda: compare_runs(db, ordered, n_boot=n_boot)), False
    with src._lock:
        whole = src._entries.get(key)
    if whole is not None:
        return whole, False
    return src._get(("comparison-probe", str(probe)) + key[1:],
                    lambda: compare_runs(db, ordered, n_boot=n_boot, probes=[probe])), True


class Background:
    """Whole comparisons computed in a background thread, one at a time per runs: the
    page draws the probe shown first, then asks for the rest here."""

    def __init__(self) -> None:
        self._lock = threading.Lock()
        self._jobs: dict[tuple, threading.Thread] = {}

    def start(self, db, run_ids: Sequence[int], cache, n_boot: int = N_BOOT) -> None:
        key = (tuple(sorted(int(r) for r in run_ids)), int(n_boot))

        def run():
            try:
                comparison_of(db, run_ids, cache=cache, n_boot=n_boot)
            except RundashError:  # the page shows the error when it asks again
                pass
            finally:
                with self._lock:
                    self._jobs.pop(key, None)

        with self._lock:
            if key in self._jobs:
                return
            job = self._jobs[key] = threading.Thread(target=run, daemon=True,
                                                     name="rundash-compare")
        job.start()

    def wait(self, run_ids: Sequence[int], n_boot: int = N_BOOT) -> None:
        """Until a whole comparison of these runs being computed is done."""
        with self._lock:
            job = self._jobs.get((tuple(sorted(int(r) for r in run_ids)), int(n_boot)))
        if job is not None:
            job.join()


def table_rows(comparison: dict[str, Any], probe: str | None = None) -> list[dict[str, str]]:
    """One row per matched critical of each run pair (of ``probe``, or every probe)."""
    from rundash.presentation import shift_rows

    return shift_rows(comparison, probe)


TABLE_COLUMNS = [("runs", "Runs (ref → later)"), ("probe", "Probe"),
                 ("direction", "Direction"), ("speed_a", "Critical, ref (rpm ± 1σ)"),
                 ("speed_b", "Critical, later (rpm ± 1σ)"), ("speed_shift", "Shift"),
                 ("speed_sig", "Speed shift"), ("af_a", "AF, ref"), ("af_b", "AF, later"),
                 ("af_shift", "AF shift ± 1σ"), ("af_sig", "AF shift"),
                 ("hints", "Hints (not diagnoses)")]


def _table(rows):
    from dash import html

    head = html.Tr([html.Th(t) for _, t in TABLE_COLUMNS])
    body = []
    for r in rows:
        cells = []
        for k, _ in TABLE_COLUMNS:
            cls = {"significant": "v-fail", "not significant": "v-pass"}.get(r[k], "") \
                if k.endswith("_sig") else ""
            cells.append(html.Td(r[k], className=cls))
        body.append(html.Tr(cells, className="row-fail" if r["changed"] == "changed" else ""))
        if r["notes"]:
            body.append(html.Tr(html.Td(r["notes"], colSpan=len(TABLE_COLUMNS),
                                        className="note")))
    return html.Table([html.Thead(head), html.Tbody(body)], className="plain")


def comparison_view(db, run_ids: Sequence[int], probe: str, *, cache=None,
                    n_boot: int = N_BOOT, probe_first: bool = False):
    """(trend figure, table component, status text) for the chosen runs and probe.

    ``probe_first`` (the page's callback): the probe's own comparison unless the whole
    one is cached; the pairs' verdicts then name the probe, and the other probes' fold
    is built when opened.

    Errors (runs not processed, of other machines, nothing in common) come back as a
    visible message in place of the table, with an empty trend.
    """
    from dash import html

    ids_ = list(dict.fromkeys(int(r) for r in run_ids or []))
    if len(ids_) < 2:
        return (figures.comparison_trend({"runs": []}, probe=probe or "–"),
                html.P("Tick two or more processed runs to see what changed.",
                       className="muted"), "No comparison yet.")
    try:
        try:
            comparison, partial = _comparison(db, ids_, cache, n_boot,
                                              probe if probe_first and probe else None)
        except RundashError:  # e.g. nothing in common on this probe: say what the whole says
            if not probe_first:
                raise
            comparison, partial = _comparison(db, ids_, cache, n_boot, None)
        # the probe's own comparison is the whole one on a machine of one probe
        partial = partial and any(p.name != probe for c in _ordered(db, ids_, cache)
                                  for p in c["probes"])
    except RundashError as exc:
        return (figures.comparison_trend({"runs": []}, probe=probe or "–"),
                html.Div(str(exc), className="error", role="alert"),
                "The comparison could not be made.")
    trend = figures.comparison_trend(comparison, probe=probe,
                                     uirevision=f"trend-{probe}-{','.join(map(str, ids_))}")
    rows = table_rows(comparison, probe)
    verdicts = [f"run {p['b']} against run {p['a']}" + (f" on {probe}" if partial else "")
                + f": {p['verdict']}" for p in comparison["pairs"]]
    others = [] if partial else [r for r in table_rows(comparison) if r["probe"] != probe]
    parts = [html.H3("What changed" + (f", {probe}" if probe else "")),
             html.P("; ".join(verdicts) + ".", className="muted")]
    if rows:
        parts.append(_table(rows))
    else:
        parts.append(html.P(f"No critical of {probe} to compare in these runs.",
                            className="muted"))
    if others or partial:  # a long fold is built on its first opening (other_probes_table)
        parts.append(html.Details(className="reference", id=ids.COMPARE_OTHERS, children=[
            html.Summary("Other probes (compared when opened)" if partial else
                         f"Other probes ({len(others)} rows)", id=ids.COMPARE_OTHERS_SUMMARY,
                         n_clicks=0),
            html.Div(_table(others) if others and len(others) <= EAGER_ROWS else [],
                     id=ids.COMPARE_OTHERS_BODY)]))
    parts += [html.P(comparison["rule"].capitalize() + ".", className="note"),
              html.P("Uncertainty: " + comparison["method"], className="note"),
              html.P("Hints name possible causes to look into; they are not diagnoses.",
                     className="note"),
              html.Div(comparison["caution"], className="attention")]
    ref = comparison["reference"]
    status = (f"Compared {len(ids_)} runs (reference: run {ref}, the earliest), "
              f"{n_boot} bootstrap replicates.")
    return trend, html.Div(parts), status


def other_probes_table(db, run_ids: Sequence[int], probe: str, *, cache=None,
                       n_boot: int = N_BOOT, filled: bool = True):
    """The folded rows of the probes other than ``probe``, or None when the fold came
    filled with the page (``filled``: it does with no more than EAGER_ROWS rows)."""
    from dash import html

    ids_ = list(dict.fromkeys(int(r) for r in run_ids or []))
    if len(ids_) < 2:
        return None
    comparison = comparison_of(db, ids_, cache=cache, n_boot=n_boot)
    others = [r for r in table_rows(comparison) if r["probe"] != probe]
    if filled and len(others) <= EAGER_ROWS:
        return None
    return _table(others) if others else html.P("No critical of another probe to compare.",
                                                className="muted")


# ----------------------------------------------------------------------------- layout
def default_selection(runs, run_ids: Sequence[int] = ()) -> list[int]:
    """Runs ticked when the page opens: those named, else the two newest processed runs
    of the newest run's kind (like with like)."""
    processed = [r for r in runs if r.processed]
    if run_ids:
        known = {r.id for r in processed}
        return [int(r) for r in run_ids if int(r) in known]
    if not processed:
        return []
    kind = processed[0].kind
    same = [r.id for r in processed if r.kind == kind]
    return same[:2] if len(same) >= 2 else [r.id for r in processed[:2]]


def layout(db, machine_id: int | None = None, run_ids: Sequence[int] = (), *, cache=None):
    from dash import dcc, html

    try:
        machines, machine, runs = machine_runs(db, machine_id, run_ids)
    except NotFoundError as exc:
        return html.Div(className="card", children=[
            html.H2("Not found"), html.P([f"{str(exc).capitalize()}. ",
                                         dcc.Link("Back to the runs", href="/")])])
    if machine is None:
        return html.Div(className="card", children=[
            html.H2("No machines yet"), html.P(["Import runs first on the ",
                                                dcc.Link("import page", href="/import"), "."])])
    chosen = default_selection(runs, run_ids)
    probes = [p.name for p in machine.probes]
    head = html.Div(className="card", children=[
        html.Div(dcc.Link("← machines and runs", href="/"), className="note"),
        html.H1(f"{TITLE}: {machine.spec.name}", style={"fontSize": "22px",
                                                        "margin": "4px 0"}),
        html.P("Overlay runs of one machine, see how its critical speeds and amplification "
               "factors moved across runs and overhaul cycles, and whether each change is "
               "larger than its uncertainty. The earliest ticked run is the reference.",
               className="muted"),
        html.Div(className="controls", children=[
            html.Div([html.Label("Machine", className="head"),
                      dcc.Dropdown(id=ids.COMPARE_MACHINE, clearable=False,
                                   value=machine.id, style={"width": "320px"},
                                   options=[{"label": m.spec.name, "value": m.id}
                                            for m in machines])]),
            html.Div([html.Label("Probe", className="head"),
                      dcc.RadioItems(id=ids.COMPARE_PROBE, value=probes[0] if probes else None,
                                     inline=True, inputStyle={"marginRight": "4px"},
                                     labelStyle={"marginRight": "12px"},
                                     options=[{"label": p, "value": p} for p in probes])]),
            html.Div([html.Label("Units", className="head"),
                      dcc.RadioItems(id=ids.COMPARE_UNITS, value="metric", inline=True,
                                     inputStyle={"marginRight": "4px"},
                                     labelStyle={"marginRight": "12px"},
                                     options=[{"label": "metric", "value": "metric"},
                                              {"label": "imperial", "value": "imperial"}])]),
        ]),
        html.Label("Runs (newest first)", className="head note",
                   style={"display": "block", "marginTop": "10px"}),
        dcc.Checklist(id=ids.COMPARE_RUNS, value=chosen, options=run_options(runs),
                      inputStyle={"marginRight": "6px"},
                      labelStyle={"display": "block", "padding": "2px 0"}),
        html.Div(id=ids.COMPARE_NOTE, children=[
            html.Div(n, className="warn") for n in selection_note(db, chosen, cache=cache)
            if len(chosen) >= 2]),
    ])
    graph = dict(config={"displaylogo": False, "toImageButtonOptions": {"format": "png"}})
    return html.Div([
        head,
        html.Div(className="grid2", children=[
            html.Div(className="card", children=[
                dcc.Graph(id=ids.COMPARE_BODE, style={"height": "560px"}, **graph)]),
            html.Div(className="card", children=[
                dcc.Graph(id=ids.COMPARE_POLAR, style={"height": "560px"}, **graph)])]),
        html.Div(className="card", children=[
            html.Div(id=ids.COMPARE_BUSY, className="attention", role="status",
                     style={"display": "none"}),
            html.Div("Waiting for a comparison…", id=ids.COMPARE_STATUS, className="note"),
            dcc.Graph(id=ids.COMPARE_TREND, style={"height": "560px"}, **graph),
            html.Div(id=ids.COMPARE_TABLE, children=html.Div(CAUTION, className="attention")),
            exports.compare_controls()]),
    ])


def machine_path(db, machine_id, pathname: str | None) -> str | None:
    """The page's address for another machine picked, None when it is the one shown (the
    dropdown may report its value when it is drawn)."""
    if machine_id is None:
        return None
    try:
        shown = machine_runs(db, **(match(pathname or PATH) or {}))[1]
    except NotFoundError:
        shown = None
    if shown is not None and shown.id == int(machine_id):
        return None
    return f"{PATH}/machine/{int(machine_id)}"


# ----------------------------------------------------------------------------- callbacks
def register_callbacks(app, db) -> None:
    from dash import Input, Output, State, html, no_update

    from rundash.dashboard.cache import cache_of

    cache = cache_of(app, db)
    background = Background()  # the whole comparisons, after the probe shown

    @app.callback(Output(ids.URL, "pathname", allow_duplicate=True),
                  Input(ids.COMPARE_MACHINE, "value"), State(ids.URL, "pathname"),
                  prevent_initial_call=True)
    def _machine(machine_id, pathname):
        return machine_path(db, machine_id, pathname) or no_update

    @app.callback(Output(ids.COMPARE_BODE, "figure"), Output(ids.COMPARE_POLAR, "figure"),
                  Output(ids.COMPARE_NOTE, "children"),
                  Input(ids.COMPARE_RUNS, "value"), Input(ids.COMPARE_PROBE, "value"),
                  Input(ids.COMPARE_UNITS, "value"))
    def _overlay(run_ids, probe, units):
        if not probe:
            return no_update, no_update, no_update
        system = units if units in ("metric", "imperial") else "metric"
        notes = selection_note(db, run_ids or [], cache=cache)
        bode, polar = overlay_figures(db, run_ids or [], probe, system, cache=cache)
        return bode, polar, [html.Div(n, className="warn") for n in notes]

    @app.callback(Output(ids.COMPARE_TREND, "figure"), Output(ids.COMPARE_TABLE, "children"),
                  Output(ids.COMPARE_STATUS, "children"),
                  Input(ids.COMPARE_RUNS, "value"), Input(ids.COMPARE_PROBE, "value"),
                  running=[(Output(ids.COMPARE_BUSY, "children"),
                            f"Computing the comparison ({N_BOOT} bootstrap replicates)…", ""),
                           (Output(ids.COMPARE_BUSY, "style"), {"display": "block"},
                            {"display": "none"})])
    def _compare(run_ids, probe):
        if not probe:
            return no_update, no_update, no_update
        out = comparison_view(db, run_ids or [], probe, cache=cache, probe_first=True)
        if len(set(run_ids or [])) >= 2:  # the other probes next, off the request
            background.start(db, run_ids, cache)
        return out

    @app.callback(Output(ids.COMPARE_OTHERS_BODY, "children"),
                  Input(ids.COMPARE_OTHERS_SUMMARY, "n_clicks"),
                  State(ids.COMPARE_RUNS, "value"), State(ids.COMPARE_PROBE, "value"),
                  prevent_initial_call=True)
    def _others(n_clicks, run_ids, probe):
        if n_clicks != 1:  # built on the first opening, kept after
            return no_update
        background.wait(run_ids or [])  # the whole comparison, when it is being computed
        try:
            table = other_probes_table(db, run_ids or [], probe, cache=cache, filled=False)
        except RundashError:  # the view above already says why
            return no_update
        return no_update if table is None else table
