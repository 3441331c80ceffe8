"""Speed against time, with the time spent inside each critical band."""

from __future__ import annotations

from typing import Any, Mapping, Sequence

import numpy as np
import plotly.graph_objects as go

from rundash.figures.common import (
    GRID, HALF_POWER_FILL, OPERATING_FILL, PALETTE, base_layout, decimate_minmax,
    fmt_number, make_figure, typed_array,
)
from rundash.figures.segments import time_in_band


# ----------------------------------------------------------------------------- speed
def speed_time(time_s, speed_rpm, *, criticals: Sequence[Mapping[str, Any]] = (),
               operating: Mapping[str, float] | None = None, title: str | None = None,
               uirevision: Any = None, max_points: int = 4000) -> go.Figure:
    """Speed versus time with each critical band shaded and the time spent inside it.

    A critical's band is its half-power band ``n1_rpm..n2_rpm`` when both are known, else
    its ``band_rpm``. Criticals of several probes that share a band are drawn once.
    The time inside a band is :func:`time_in_band` over the whole record (full data; the
    drawn line is decimated by :func:`decimate_minmax`).
    """
    t = np.asarray(time_s, dtype=float)
    n = np.asarray(speed_rpm, dtype=float)
    idx = decimate_minmax(t, n, max_points=max_points)
    data = [{"type": "scatter", "x": typed_array(t[idx]), "y": typed_array(n[idx]), "mode": "lines",
             "name": "speed", "meta": "data", "line": {"color": PALETTE[0], "width": 2},
             "hovertemplate": "%{x:.1f} s<br>%{y:.0f} rpm<extra></extra>"}]
    layout = base_layout(title or "Speed versus time", uirevision, 360)
    layout["xaxis"]["title"] = {"text": "time from record start (s)"}
    layout["yaxis"].update(title={"text": "speed (rpm)"}, rangemode="tozero")
    if operating and operating.get("min_operating_speed_rpm") is not None:
        layout["shapes"].append({
            "type": "rect", "xref": "x domain", "yref": "y", "x0": 0, "x1": 1,
            "y0": operating["min_operating_speed_rpm"],
            "y1": operating["max_continuous_speed_rpm"], "fillcolor": OPERATING_FILL,
            "line": {"width": 0}, "layer": "below"})
        layout["annotations"].append({
            "text": "operating range", "xref": "x domain", "yref": "y", "x": 0,
            "y": operating["max_continuous_speed_rpm"], "xanchor": "left", "yanchor": "top",
            "showarrow": False, "font": {"size": 10}})
    bands = []
    for c in criticals:
        lo, hi = (c.get("n1_rpm"), c.get("n2_rpm")) if c.get("n1_rpm") and c.get("n2_rpm") \
            else tuple(c.get("band_rpm") or (None, None))
        if lo is None or hi is None:
            continue
        key = (round(lo, -1), round(hi, -1))
        if any(b["key"] == key for b in bands):
            continue
        bands.append({"key": key, "lo": float(lo), "hi": float(hi), "c": c,
                      "seconds": time_in_band(t, n, lo, hi)})
    for b in bands:
        layout["shapes"].append({"type": "rect", "xref": "x domain", "yref": "y", "x0": 0,
                                 "x1": 1, "y0": b["lo"], "y1": b["hi"],
                                 "fillcolor": HALF_POWER_FILL, "line": {"width": 0},
                                 "layer": "below"})
    if bands:  # the note goes in the corner the speed curve does not end in
        ends_low = bool(n.size) and float(n[-1]) < 0.5 * float(np.nanmax(n))
        lines = [f"{b['lo']:.0f}–{b['hi']:.0f} rpm (critical {fmt_number(b['c'].get('speed_rpm'))} rpm):"
                 f" {b['seconds']:.1f} s" for b in bands]
        layout["annotations"].append({
            "text": "<b>time inside critical bands</b><br>" + "<br>".join(lines),
            "xref": "paper", "yref": "paper", "x": 0.99, "y": 0.97 if ends_low else 0.03,
            "xanchor": "right", "yanchor": "top" if ends_low else "bottom", "align": "left",
            "showarrow": False,
            "bgcolor": "rgba(255,255,255,0.85)", "bordercolor": GRID, "font": {"size": 10}})
    data.append({"type": "scatter", "x": [None], "y": [None], "mode": "markers",
                 "name": "time in band", "meta": "bands", "visible": "legendonly",
                 "showlegend": False,
                 "customdata": [[b["lo"], b["hi"], b["seconds"]] for b in bands]})
    return make_figure(data, layout)
