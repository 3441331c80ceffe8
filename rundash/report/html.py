"""The sign-off report of one run as one self-contained HTML page.

Reads stored results through the storage read functions and (optionally) the run
comparison (:func:`rundash.workflows.comparison.compare_runs`); draws the plots with
:mod:`rundash.figures`. Two flavours of the same page:

``interactive``
    plotly.js is inlined once (``include_plotlyjs=True``): the file opens offline in any
    browser, with zoom and hover.
``static``
    every figure is a static SVG made by kaleido (>= 1, which drives the system
    Chromium), embedded as a data URI; the page is what the PDF prints.
"""

from __future__ import annotations

import base64
import html
from datetime import datetime, timezone
from typing import Any, Literal, Sequence

from rundash.report.review_section import (
    has_review, review_section, stored_signoff, verdict_line,
)
from rundash.workflows.review import SIGN_OFF_DECISIONS, review_in
from rundash import CAUTION, __version__, figures
from rundash import presentation as pr
from rundash.conventions import side_of_top
from rundash.errors import ConfigError, NotFoundError

Flavour = Literal["interactive", "static"]
FIG_WIDTH_PX, FIG_HEIGHT_PX = 900, 520


def _e(x: Any) -> str:
    return html.escape("" if x is None else str(x))


def _n(x: Any, digits: int = 0, unit: str = "") -> str:
    return _e(pr.number(x, digits, unit))


def _table(head: Sequence[str], rows: Sequence[Sequence[str]], cls: str = "") -> str:
    h = "".join(f"<th>{_e(c)}</th>" for c in head)
    body = "".join("<tr>" + "".join(f"<td>{c}</td>" for c in r) + "</tr>" for r in rows)
    return f'<table class="{cls}"><thead><tr>{h}</tr></thead><tbody>{body}</tbody></table>'


def _kv(rows: Sequence[tuple[str, str]]) -> str:
    return '<table class="kv">' + "".join(
        f"<tr><th>{_e(k)}</th><td>{v}</td></tr>" for k, v in rows) + "</table>"


# ----------------------------------------------------------------------------- data
def load_report_data(db, run_id: int, compare: Sequence[int] = (), *, n_boot: int = 100
                     ) -> dict[str, Any]:
    """Everything the report shows, read through the storage read functions."""
    from rundash.storage import queries as q

    with db.read() as conn:
        run = q.get_run(conn, run_id)
        machine = q.get_machine(conn, q.run_machine_id(conn, run_id))
        proc = q.load_processing(conn, run_id)
        if proc is None:
            raise NotFoundError(f"run {run_id} is not processed: run 'rundash process "
                                f"{run_id}' first")
        channels = q.list_channels(conn, run_id)
        tracks = q.load_tracks(conn, run_id, order=1.0)
        prof = q.load_speed_profile(conn, run_id)
        review = review_in(conn, run_id)
        others = {}
        for rid in compare:
            others[rid] = dict(run=q.get_run(conn, rid),
                               proc=q.load_processing(conn, rid),
                               tracks=q.load_tracks(conn, rid, order=1.0))
    comparison = None
    if compare:
        from rundash.workflows.comparison import compare_runs
        # the earliest run is the reference, so shifts read forward in time
        ids = [run_id, *[r for r in compare if r != run_id]]
        infos = {run_id: run, **{r: o["run"] for r, o in others.items()}}
        far = datetime.max.replace(tzinfo=timezone.utc)
        ids.sort(key=lambda r: (infos[r].started_at or far, r))
        comparison = compare_runs(db, ids, n_boot=n_boot)
    return dict(run=run, machine=machine, proc=proc, channels=channels, tracks=tracks,
                speed_profile=prof, others=others, comparison=comparison, review=review)


def _traces(tracks, segments, probe: str, *, run_label: str | None = None,
            color: str | None = None) -> list[dict[str, Any]]:
    by = {t.compensated: t for t in tracks if t.probe_name == probe}
    t = by.get(True) or by.get(False)
    if t is None:
        return []
    label = f"{run_label} {probe}" if run_label else probe
    extra = {"color": color} if color else {}
    return figures.track_pieces(t, segments, probe=label, skip_steady=True, min_points=3,
                                **extra)


def build_figures(data: dict[str, Any]) -> list[tuple[str, Any]]:
    """(caption, plotly Figure) pairs: speed, then Bode and polar per probe, overlays."""
    run, machine, proc = data["run"], data["machine"], data["proc"]
    f = proc.findings or {}
    crit = f.get("criticals") or []
    spec = machine.spec
    op = pr.operating_range(spec)
    out = []
    if data["speed_profile"] is not None:
        t, n = data["speed_profile"]
        out.append(("Speed versus time, with the time spent in each critical band",
                    figures.speed_time(t, n, criticals=crit, operating=op,
                                       title=f"Speed versus time, run {run.id}")))
    kinds = {c.probe_name: c.kind for c in data["channels"] if c.role == "probe"}
    for probe, kind in kinds.items():
        tr = _traces(data["tracks"], proc.segments, probe)
        if not tr:
            continue
        pc = [c for c in crit if c.get("probe") == probe]
        comp = kind == "proximity" and any(t.compensated for t in data["tracks"]
                                           if t.probe_name == probe)
        word = "slow-roll compensated" if comp else "uncompensated"
        model = pr.model_curves(proc.findings, probe, kind=kind, compensated=comp)
        if model:
            word += ", the run's fitted modal model dotted"
        out.append((f"Bode plot of {probe}, 1X ({word}), criticals and margins marked",
                    figures.bode(tr, kind=kind, criticals=pc, operating=op, compensated=comp,
                                 title=f"Bode plot, {probe} 1X ({word})", model=model)))
        out.append((f"Polar plot of {probe}, 1X ({word})",
                    figures.polar(tr, kind=kind, rotation=spec.rotation, criticals=pc,
                                  title=f"Polar plot, {probe} 1X ({word})", model=model)))
    for b in f.get("bearing_modes") or []:
        out.append((f"Split view of bearing {b.get('bearing', '?')}: the fitted model's major-axis "
                    f"response and its modes' directions",
                    figures.bearing_modes(b, kind=kinds.get((b.get("probes") or [""])[0],
                                                            "proximity"))))
    if data["others"]:
        first = next(iter(kinds), None)
        probe = next((c["probe"] for c in crit), first)
        kind = kinds.get(probe, "proximity")
        traces = []
        runs = [(run.id, data["tracks"], proc)] + [
            (rid, o["tracks"], o["proc"]) for rid, o in data["others"].items()]
        for k, (rid, tracks, p) in enumerate(runs):
            traces += _traces(tracks, p.segments if p else [], probe, run_label=f"run {rid}",
                              color=figures.PALETTE[k % len(figures.PALETTE)])
        if traces:
            out.append((f"Bode plots of {probe} across the compared runs (1X)",
                        figures.bode(traces, kind=kind, operating=op,
                                     title=f"Bode plots across runs, {probe} 1X")))
            out.append((f"Polar plots of {probe} across the compared runs (1X)",
                        figures.polar(traces, kind=kind, rotation=spec.rotation,
                                      title=f"Polar plots across runs, {probe} 1X")))
    return out


# ----------------------------------------------------------------------------- sections
CSS = """
@page { size: A4; margin: 14mm 12mm 16mm 12mm;
        @bottom-right { content: "page " counter(page) " of " counter(pages);
                        font: 9pt sans-serif; color: #555; } }
body { font-family: "DejaVu Sans", Arial, sans-serif; font-size: 10.5pt; color: #222;
       max-width: 1000px; margin: 0 auto; padding: 12px; }
h1 { font-size: 19pt; margin: 0 0 4px 0; }
h2 { font-size: 13.5pt; border-bottom: 2px solid #0072B2; padding-bottom: 2px;
     margin-top: 20px; break-after: avoid; }
h3 { font-size: 11.5pt; margin: 12px 0 4px 0; break-after: avoid; }
table { border-collapse: collapse; width: 100%; margin: 4px 0 8px 0; font-size: 9pt;
        break-inside: auto; }
th, td { border: 1px solid #c8c8c8; padding: 2px 5px; text-align: left; vertical-align: top; }
thead th { background: #eef3f8; }
tr { break-inside: avoid; }
table.kv th { width: 32%; background: #f6f6f6; font-weight: normal; }
.caution { border: 2px solid #D55E00; background: #fff4ec; padding: 8px 10px; margin: 10px 0;
           font-weight: bold; }
.verdict { font-size: 14pt; font-weight: bold; }
.v-pass { color: #007a55; } .v-fail { color: #c0392b; } .v-not { color: #666; }
.muted { color: #555; } .small { font-size: 8.5pt; }
.fig { break-inside: avoid; margin: 6px 0 14px 0; }
.fig img { width: 100%; height: auto; border: 1px solid #ddd; }
.fig .cap { font-size: 9pt; color: #444; margin-top: 2px; }
.signoff { border: 2px solid #222; padding: 10px 12px; break-inside: avoid; margin-top: 14px; }
.signoff td, .signoff th { border: none; padding: 6px 4px; font-size: 10.5pt; }
.line { display: inline-block; min-width: 260px; border-bottom: 1px solid #222; }
.box { display: inline-block; width: 11px; height: 11px; border: 1px solid #222;
       margin: 0 4px 0 12px; vertical-align: middle; }
.box.x { background: #222; }
.earlier { color: #8a1c1c; }
.sig { color: #c0392b; font-weight: bold; }
"""


def _verdict_word(v: str | None) -> str:
    cls = {"pass": "v-pass", "fail": "v-fail"}.get(v or "", "v-not")
    return f'<span class="verdict {cls}">{_e((v or "not judged").upper())}</span>'


def _run_section(data) -> str:
    run, m = data["run"], data["machine"]
    s = m.spec
    tach_deg = float(m.tach.angle_deg or 0.0) if m.tach else 0.0
    probes = ", ".join(
        f"{p.name} ({p.kind}, {p.bearing or '–'}"
        + (f" {p.axis}" if p.axis and p.axis != "none" else "")
        + f", {side_of_top(tach_deg + p.angle_deg, s.rotation)} = {p.angle_deg:g}° from the "
        "once-per-rev sensor)" for p in m.probes)
    rows = [("machine", _e(s.name)), ("kind", _e(s.kind)),
            ("rated speed", _n(s.rated_speed_rpm, 0, "rpm")),
            ("operating range", f"{_n(s.min_operating_speed_rpm)}–"
                                f"{_n(s.max_continuous_speed_rpm)} rpm (N_min–N_mc)"),
            ("trip speed", _n(s.trip_speed_rpm, 0, "rpm")), ("rotation", _e(s.rotation)),
            ("guidance profile", _e(s.profile)), ("probes", _e(probes)),
            ("run", f"{run.id}: {_e(run.label)}"), ("run kind", _e(run.kind)),
            ("overhaul cycle", _e(run.cycle or "–")),
            ("started (UTC)", _e(run.started_at.strftime("%Y-%m-%d %H:%M") if run.started_at
                                 else "not given")),
            ("duration", _n(run.duration_s, 1, "s")), ("channels", _n(run.n_channels)),
            ("source file", _e(run.source_name)),
            ("source SHA-256", f'<span class="small">{_e(run.source_sha256)}</span>'),
            ("notes", _e(run.notes or "–"))]
    return "<h2>1. Machine and run</h2>" + _kv(rows)


def _processing_section(data) -> str:
    proc = data["proc"]
    f = proc.findings or {}
    p = proc.params or {}
    tr = proc.tach_report or {}
    sr = proc.slow_roll_rpm
    rows = [("processed", _e(proc.created_at.strftime("%Y-%m-%d %H:%M UTC") if proc.created_at
                             else "–") + f" by rundash {_e(proc.rundash_version)}"),
            ("orders tracked", _e(", ".join(f"{o:g}X" for o in p.get("orders", [])))),
            ("revolutions per vector", _n(p.get("revs_per_block"))),
            ("slow-roll window", f"{sr[0]:.0f}–{sr[1]:.0f} rpm" if sr else "none (not "
             "compensated)"),
            ("speed range", "–".join(_n(x) for x in (f.get("processing") or {}).get(
                "speed_range_rpm") or []) + " rpm"),
            ("segments", _e("; ".join(f"{s['kind']} {s['t_start_s']:.1f}–{s['t_end_s']:.1f} s "
                                      f"({s['rpm_start']:.0f}→{s['rpm_end']:.0f} rpm)"
                                      for s in proc.segments or [])))]
    rep = tr.get("repair_times_s") or []
    trows = [("pulses per revolution", _n(tr.get("pulses_per_rev"))),
             ("tach edges found", _n(tr.get("n_edges"))),
             ("revolutions", _n(tr.get("n_revs"))),
             ("missing pulses filled", _n(tr.get("n_missing_filled"))),
             ("extra pulses removed", _n(tr.get("n_extra_removed"))),
             ("repairs at (s)", _e(", ".join(f"{t:.3f}" for t in rep[:30])
                                   + (f" … ({len(rep)} in all)" if len(rep) > 30 else ""))
              if rep else "none"),
             ("tach notes", _e("; ".join(tr.get("notes") or []) or "none"))]
    return ("<h2>2. Processing</h2>" + _kv(rows) +
            "<h3>Once-per-rev reference (tach) and its repairs</h3>" + _kv(trows))


def _verdict_cell(v: str) -> str:
    cls = {"pass": "v-pass", "fail": "v-fail"}.get(v, "v-not")
    return f'<b class="{cls}">{_e(v)}</b>'


def _findings_section(data) -> str:
    f = data["proc"].findings
    if not f:
        return "<h2>3. Findings</h2><p>No findings stored for this run.</p>"
    kinds = {c.probe_name: c.kind for c in data["channels"] if c.role == "probe"}
    crit = pr.critical_rows(f, kinds=kinds)
    cols = ("probe", "direction", "speed", "peak", "af_half_power", "af_phase", "af_fit",
            "af", "apparent", "sweep_free", "classification", "confidence", "margin",
            "required")
    rows = [[_e(c[k]) for k in cols] + [_verdict_cell(c["verdict"])] for c in crit]
    out = [f"<h2>3. Findings</h2><p>Run verdict: {_verdict_word(f.get('run_verdict'))}</p>",
           f"<p>{_e(pr.summary_line(f))}</p>",
           f'<div class="caution">{_e(f.get("caution") or CAUTION)}</div>',
           "<h3>Critical speeds and separation margins</h3>"]
    out.append(_table(["probe", "direction", "speed (rpm)", "peak 1X", "AF half-power",
                       "AF phase", "AF fit", "AF governing", "apparent (sweep): rpm, AF",
                       "sweep-free (modal fit): rpm, AF", "class", "confidence",
                       "margin found", "required", "verdict"], rows) if rows else
               "<p>No critical speed was found in the speed range of the run.</p>")
    ev = [f"<li><b>{_e(c['probe'])} {_e(c['direction'])} {_e(c['speed'])} rpm</b>: "
          f"{_e(c['source'])}" + (f"; {_e(c['governing_reason'])}" if c["governing_reason"]
                                  else "")
          + (f"; {_e(c['mode_hint'])}" if c["mode_hint"] else "")
          + (f"; {_e(c['sweep_note'])}" if c["sweep_note"] else "") + "</li>" for c in crit]
    if ev:
        out.append("<h3>Why (per critical)</h3><ul class='small'>" + "".join(ev) + "</ul>")
    modal = pr.modal_model_lines(f) + pr.bearing_mode_lines(f)
    if modal:
        out.append("<h3>Modal model of the run (sweep-free readings)</h3><ul class='small'>"
                   + "".join(f"<li>{_e(x)}</li>" for x in modal) + "</ul>")
    lim = [[_e(x[k]) for k in ("probe", "direction", "measure", "where", "speed", "value",
                               "limit", "zone", "verdict")]
           + [f'<span class="small">{_e(x["basis"])}; {_e(x["source"])}</span>']
           for x in pr.limit_rows(f, kinds=kinds)]
    out.append("<h3>Vibration limit checks</h3>")
    out.append(_table(["probe", "direction", "measure", "where", "at rpm", "level", "limit",
                       "zone", "result", "basis and source"], lim) if lim else
               "<p>No limit applies to this run's probes.</p>")
    # the run's warnings (each once), then, as on the review page, the notes that hold for
    # every run apart from them
    warn, standing = pr.split_standing(list(dict.fromkeys(
        str(w) for w in list(f.get("warnings") or []) + list(data["proc"].warnings or []))))
    if warn:
        out.append("<h3>Warnings</h3><ul>" + "".join(f"<li>{_e(w)}</li>" for w in warn)
                   + "</ul>")
    if standing:
        out.append('<h3>Notes</h3><ul class="standing">'
                   + "".join(f"<li>{_e(w)}</li>" for w in standing) + "</ul>")
    prof = f.get("profile") or {}
    rules = [[_e(r.get("rule")), _e(r.get("document")), _e(r.get("edition")),
              _e(r.get("clause")), _e(r.get("confidence"))] for r in prof.get("rules") or []]
    out.append(f"<h3>Guidance profile: {_e(prof.get('name'))} — {_e(prof.get('title'))}</h3>")
    if prof.get("needs_confirmation"):
        out.append("<p>How sure these rules are is said at the top of the report.</p>")
    out.append(_table(["rule", "document", "edition", "clause", "confidence"], rules))
    return "".join(out)


def _confidence_line(f) -> str:
    """The profile's confidence statement, once, under the verdict."""
    note = ((f or {}).get("profile") or {}).get("confidence_note")
    return f'<p class="confidence"><b>{_e(note)}</b></p>' if note else ""


def _comparison_section(data) -> str:
    c = data["comparison"]
    if not c:
        return ""
    runs = {r["id"]: r for r in c["runs"]}
    out = ["<h2>4. Comparison with other runs</h2>",
           f"<p>Reference: {_e(pr.run_name(runs[c['reference']]))}. Shifts read later minus "
           f"earlier; ± is one sigma; a significant change: {_e(c['rule'])}.</p>",
           f"<p class='small muted'>{_e(c['method'])}</p>"]

    def sig(word: str) -> str:
        return f"<span class='sig'>{_e(word)}</span>" if word == "significant" else _e(word)
    for p in c["pairs"]:
        out.append(f"<h3>{_e(pr.run_name(runs[p['a']]))} → {_e(pr.run_name(runs[p['b']]))}: "
                   f"{_e(p['verdict'])}</h3>")
        rows = [[_e(m["probe"]), _e(m["direction"]), _e(m["speeds"]),
                 _e(m["speed_shift"]), sig(m["speed_sig"]), _e(m["afs"]), _e(m["af_shift"]),
                 sig(m["af_sig"]), _e(m["peaks"]), _e(m["peak_shift"]), _e(m["changed"])]
                for m in pr.shift_rows({"pairs": [p]})]
        out.append(_table(["probe", "direction", "critical (rpm)", "speed shift", "speed",
                           "AF", "AF shift", "AF", "peak 1X", "peak shift", "changed"], rows))
        ph = [[_e(x[k]) for k in ("probe", "quantity", "a", "b", "change")]
              + [sig(x["significant"])] for x in pr.phase_rows(p)]
        if ph:
            out.append(_table(["probe", "quantity", "earlier", "later", "change", "change is"],
                              ph))
        sr = [[_e(x[k]) for k in ("probe", "a", "b", "change", "material")]
              for x in pr.slow_roll_rows(p)]
        if sr:
            out.append("<p class='small'>Slow-roll vectors (runout, bow):</p>" +
                       _table(["probe", "earlier", "later", "change", "material"], sr))
        notes = pr.pair_notes(p)
        if notes:
            out.append("<ul class='small'>" + "".join(f"<li>{_e(n)}</li>" for n in notes)
                       + "</ul>")
    if c["hints"]:
        out.append("<h3>Hints (patterns the trade watches for; not diagnoses)</h3><ul>"
                   + "".join(f"<li>{_e(h)}</li>" for h in c["hints"]) + "</ul>")
    return "".join(out)


def _signoff(reviewer: str, decision: str, remarks: str, role: str = "") -> str:
    opts = SIGN_OFF_DECISIONS
    d = (decision or "").strip().lower()
    boxes = "".join(f'<span class="box{" x" if d == o else ""}"></span>{_e(o)}' for o in opts)
    extra = f" ({_e(decision)})" if decision and d not in opts else ""
    today = datetime.now(timezone.utc).strftime("%Y-%m-%d")
    return (
        '<h2>Sign-off</h2><div class="signoff"><table>'
        f'<tr><th>Reviewer</th><td><span class="line">{_e(reviewer) or "&nbsp;"}</span></td></tr>'
        f'<tr><th>Role</th><td><span class="line">{_e(role) or "&nbsp;"}</span></td></tr>'
        f'<tr><th>Date</th><td><span class="line">{today if reviewer else "&nbsp;"}</span>'
        f'</td></tr><tr><th>Decision</th><td>{boxes}{extra}</td></tr>'
        f'<tr><th>Remarks</th><td><span class="line" style="min-width:520px">'
        f'{_e(remarks) or "&nbsp;"}</span><br><span class="line" style="min-width:520px">'
        '&nbsp;</span></td></tr>'
        '<tr><th>Signature</th><td><span class="line">&nbsp;</span></td></tr></table>'
        f'<p class="small">{_e(CAUTION)}</p></div>')


def _svg_uri(fig) -> str:
    import warnings

    with warnings.catch_warnings():  # plotly notes that a running kaleido server ignores kopts
        warnings.simplefilter("ignore", UserWarning)
        svg = fig.to_image(format="svg", width=FIG_WIDTH_PX,
                           height=int(fig.layout.height or FIG_HEIGHT_PX))
    return "data:image/svg+xml;base64," + base64.b64encode(svg).decode("ascii")


def render(data: dict[str, Any], *, flavour: Flavour = "interactive", reviewer: str = "",
           role: str = "", decision: str = "", remarks: str = "") -> str:
    """The report page as one HTML string (see the module docstring for ``flavour``)."""
    run, m = data["run"], data["machine"]
    f = data["proc"].findings or {}
    figs = build_figures(data)
    parts = []
    n_fig = 0
    if flavour == "static":
        try:
            import kaleido
        except ImportError:
            raise ConfigError("static figures need the PDF extra: pip install "
                              "'rundash[pdf]' (kaleido)") from None
        kaleido.start_sync_server(silence_warnings=True)
        try:
            for cap, fig in figs:
                n_fig += 1
                parts.append(f'<div class="fig"><img alt="{_e(cap)}" src="{_svg_uri(fig)}">'
                             f'<div class="cap">Figure {n_fig}. {_e(cap)}</div></div>')
        finally:
            kaleido.stop_sync_server(silence_warnings=True)
    else:
        for cap, fig in figs:
            n_fig += 1
            div = fig.to_html(full_html=False, include_plotlyjs=n_fig == 1,
                              config={"displaylogo": False, "responsive": True})
            parts.append(f'<div class="fig">{div}<div class="cap">Figure {n_fig}. {_e(cap)}'
                         "</div></div>")
    review = data.get("review")
    n_sec = (5 if data["comparison"] else 4) + (1 if has_review(review) else 0)
    made = datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    title = f"Run review report — {m.spec.name}, run {run.id}"
    return (
        f"<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'><title>{_e(title)}</title>"
        f"<style>{CSS}</style></head><body>"
        f"<h1>{_e(title)}</h1><p class='muted'>{_e(run.label)} · {_e(run.kind)} · made {made} "
        f"by rundash {__version__}</p>"
        f"<p>Run verdict: {_verdict_word(f.get('run_verdict'))}</p>" + verdict_line(review)
        + _confidence_line(f)
        + f'<div class="caution">{_e(CAUTION)}</div>'
        + _run_section(data) + _processing_section(data) + _findings_section(data)
        + _comparison_section(data) + review_section(review, n_sec - 1)
        + f"<h2>{n_sec}. Plots</h2>" + "".join(parts)
        # the stored sign-off fills the block; without one, the fields given (or blanks)
        + (stored_signoff(review, typed=bool(reviewer or decision or remarks or role))
           or _signoff(reviewer, decision, remarks, role))
        + "</body></html>")
