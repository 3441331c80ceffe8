"""Runs compared: critical speed and amplification factor run by run against date."""

from __future__ import annotations

from typing import Any, Mapping, Sequence

import plotly.graph_objects as go

from rundash.figures.common import (
    INK, PALETTE, add_vline, add_vrect, base_layout, direction_style, make_figure,
)


# ----------------------------------------------------------------------------- run trend
#: Light fills of the overhaul-cycle bands of :func:`comparison_trend` (Okabe-Ito hues).
CYCLE_FILL_ALPHA = 0.10


def _rgba(hex_color: str, alpha: float) -> str:
    h = hex_color.lstrip("#")
    r, g, b = (int(h[i:i + 2], 16) for i in (0, 2, 4))
    return f"rgba({r}, {g}, {b}, {alpha:g})"


def _cycle_bands(points: Sequence[tuple[str, str]]) -> list[dict[str, Any]]:
    """Bands of the overhaul cycles on a date axis, from (start ISO, cycle) pairs.

    A cycle lasts from its first run to the first run of the next cycle (the last one to
    its own last run); cycles are ordered by their first run. Each band carries its
    ``cycle``, ``x0``, ``x1`` (ISO strings) and ``color``.
    """
    first: dict[str, str] = {}
    last: dict[str, str] = {}
    for when, cyc in sorted(points):
        first.setdefault(cyc, when)
        last[cyc] = when
    order = sorted(first, key=lambda c: first[c])
    bands = []
    for i, cyc in enumerate(order):
        x1 = first[order[i + 1]] if i + 1 < len(order) else last[cyc]
        bands.append({"cycle": cyc, "x0": first[cyc], "x1": x1,
                      "color": PALETTE[(i + 2) % (len(PALETTE) - 1)]})
    return bands


def comparison_trend(comparison: Mapping[str, Any], *, probe: str,
                     title: str | None = None, uirevision: Any = None) -> go.Figure:
    """Critical speed (top) and amplification factor (bottom) of one probe, run by run,
    against each run's start date, with one-sigma error bars and the overhaul cycles.

    Parameters
    ----------
    comparison : dict
        A comparison of schema ``rundash.comparison/1``
        (:func:`rundash.workflows.comparison.compare_runs`). Each run's ``estimates`` of ``probe``
        give the points: ``speed_rpm`` ± ``speed_std_rpm`` and ``af`` ± ``af_std``
        (one-sigma bootstrap spreads; a missing spread draws no bar).
    probe : str
        The probe whose criticals are drawn.

    Returns
    -------
    plotly.graph_objects.Figure
        One trace per panel, run direction and critical (numbered from the lowest speed
        within each run), ``meta='trend'``, with ``customdata`` the run ids. Marker colour
        and a shaded band give the run's overhaul cycle (``layout.meta['cycles']`` lists
        the bands); marker shape and line dash give the run direction. Runs without a
        start date cannot be placed and are named in ``layout.meta['undated_runs']``.
    """
    runs = list(comparison.get("runs") or [])
    dated = [r for r in runs if r.get("started_at")]
    bands = _cycle_bands([(r["started_at"], r.get("cycle") or "no cycle") for r in dated])
    color_of = {b["cycle"]: b["color"] for b in bands}
    series: dict[tuple[str, int], list[tuple[dict, dict]]] = {}
    for r in dated:
        for e in r.get("estimates") or []:
            if e.get("probe") != probe:
                continue
            crit = sorted((c for c in e.get("criticals") or [] if c.get("speed_rpm")),
                          key=lambda c: c["speed_rpm"])
            for i, c in enumerate(crit):
                series.setdefault((e.get("direction") or "mixed", i + 1), []).append((r, c))
    data: list[dict] = []
    for (direction, n), pts in sorted(series.items(), key=lambda kv: (kv[0][1], kv[0][0])):
        pts = sorted(pts, key=lambda p: p[0]["started_at"])
        name = f"critical {n}, {direction}"
        style = direction_style(direction)
        x = [p[0]["started_at"] for p in pts]
        colors = [color_of[p[0].get("cycle") or "no cycle"] for p in pts]
        hover = [f"run {r['id']}: {r.get('label') or ''}<br>cycle {r.get('cycle') or '–'}"
                 f"<br>found in {c.get('n_found')} of {c.get('n_boot')} replicates"
                 for r, c in pts]
        for yaxis, val, std, fmt in (("y", "speed_rpm", "speed_std_rpm", ".1f"),
                                     ("y2", "af", "af_std", ".2f")):
            y = [c.get(val) for _, c in pts]
            err = [c.get(std) for _, c in pts]
            unit = " rpm" if val == "speed_rpm" else ""
            data.append({
                "type": "scatter", "x": x, "y": y, "xaxis": yaxis.replace("y", "x"),
                "yaxis": yaxis, "mode": "lines+markers", "name": name, "legendgroup": name,
                "showlegend": yaxis == "y", "meta": "trend", "connectgaps": False,
                "customdata": [r["id"] for r, _ in pts],
                "error_y": {"type": "data", "array": err, "visible": True,
                            "color": INK, "thickness": 1.5, "width": 6},
                "line": {"color": "#888888", "dash": style["dash"], "width": 1},
                "marker": {"symbol": style["symbol"], "size": 11, "color": colors,
                           "line": {"color": INK, "width": 1}},
                "text": hover,
                "hovertemplate": "%{text}<br>%{y:" + fmt + "}" + unit + " ± %{error_y.array:"
                + fmt + "}" + unit + " (1σ)<extra>" + name + "</extra>"})
    layout = base_layout(title or f"Critical speed and AF per run, {probe}", uirevision, 560)
    axis = layout.pop("xaxis")
    layout.pop("yaxis")
    layout.update(
        xaxis=dict(axis, anchor="y", domain=[0.0, 1.0], matches="x2", showticklabels=False,
                   type="date"),
        xaxis2=dict(axis, anchor="y2", domain=[0.0, 1.0], type="date",
                    title={"text": "run start (UTC)"}),
        yaxis=dict(axis, anchor="x", domain=[0.53, 1.0],
                   title={"text": "critical speed (rpm)"}),
        yaxis2=dict(axis, anchor="x2", domain=[0.0, 0.43],
                    title={"text": "amplification factor"}),
        legend={"orientation": "h", "yanchor": "top", "y": -0.13, "xanchor": "left", "x": 0,
                "font": {"size": 11}},
        margin={"l": 64, "r": 24, "t": 56, "b": 120})
    for b in bands:
        for row in (1, 2):
            add_vrect(layout, b["x0"], b["x1"], _rgba(b["color"], CYCLE_FILL_ALPHA), row=row)
            # the cycle's edge as a line too: a cycle of one day has a band too thin to see
            add_vline(layout, b["x0"], {"color": b["color"], "width": 2}, row=row)
        layout["annotations"].append({
            "text": f"cycle: {b['cycle']}", "xref": "x", "yref": "y domain", "x": b["x0"],
            "y": 1.0, "xanchor": "left", "yanchor": "bottom", "showarrow": False,
            "font": {"size": 11, "color": b["color"]}})
    layout["annotations"].append({
        "text": "error bars: ±1σ bootstrap (hidden by the marker when smaller); marker colour "
                "and band: overhaul cycle; shape: run direction", "xref": "paper",
        "yref": "paper", "x": 0, "y": -0.2, "xanchor": "left", "yanchor": "top",
        "showarrow": False, "font": {"size": 10, "color": "#666666"}})
    layout["meta"] = {"cycles": bands,
                      "undated_runs": [r["id"] for r in runs if not r.get("started_at")]}
    return make_figure(data, layout)
