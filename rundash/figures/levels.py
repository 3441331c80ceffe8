"""Levels against limits: the direct (unfiltered) level beside 1X, with the limit lines and
reference zones of a guidance profile."""

from __future__ import annotations

from typing import Any, Mapping, Sequence

import numpy as np
import plotly.graph_objects as go

from rundash.figures.common import (
    MAX_POINTS, PALETTE, UnitSystem, add_hline, add_operating_shapes, base_layout,
    direction_style, display_pieces, limit_label, make_figure, trace_groups, typed_array,
)
from rundash.units import display_unit, to_display


# ----------------------------------------------------------------------------- direct
def direct_vs_filtered(traces: Sequence[Mapping[str, Any]], *, kind: str = "proximity",
                       system: UnitSystem = "metric",
                       limit_lines: Sequence[Mapping[str, Any]] = (),
                       operating: Mapping[str, float] | None = None, title: str | None = None,
                       uirevision: Any = None, max_points: int = MAX_POINTS) -> go.Figure:
    """Direct (unfiltered) level and 1X amplitude versus speed on one axis, with limits.

    ``traces`` as in :func:`bode` plus ``direct`` (storage units: um p-p or mm/s rms).
    One convention per axis: for proximity probes both are p-p; for velocity and
    acceleration the direct level is rms and the 1X (stored as peak) is drawn as its rms,
    peak/√2 (a sinusoid's rms), so that it can never rise above the overall level it is
    part of (the rms of one component is at most the rms of the whole, Parseval). The
    axis title and the trace names say so. ``limit_lines`` with ``value`` are drawn as
    horizontal lines, those with ``speed_rpm``/``values`` as curves (reference zones).
    """
    data: list[dict] = []
    layout = base_layout(title or "Direct (unfiltered) level beside 1X", uirevision, 480)
    for k, ((probe, direction), group) in enumerate(trace_groups(traces, ("probe", "direction"))):
        color = group[0].get("color") or PALETTE[k % len(PALETTE)]
        dash = direction_style(direction)["dash"]
        arr = display_pieces(group, kind, system, phase=None, max_points=max_points,
                              fields=("direct", "amplitude"))
        base = f"{probe} {direction or ''}".strip()
        x = typed_array(arr["rpm"])
        one_x = arr["amplitude"] if kind == "proximity" else arr["amplitude"] / np.sqrt(2.0)
        data.append({"type": "scatter", "x": x, "y": typed_array(arr["direct"]), "mode": "lines",
                     "name": f"{base} direct", "meta": "data",
                     "line": {"color": color, "dash": dash, "width": 2.2}})
        data.append({"type": "scatter", "x": x, "y": typed_array(one_x), "mode": "lines",
                     "name": f"{base} 1X" + ("" if kind == "proximity" else " (rms = pk/√2)"),
                     "meta": "data", "opacity": 0.75,
                     "line": {"color": color, "dash": dash, "width": 1}})
    add_operating_shapes(layout, operating)
    add_limit_lines(data, layout, limit_lines, kind, system)
    tops = [float(np.nanmax(to_display(np.asarray(t["direct"], float), kind, system)))
            for t in traces if len(t["direct"])]
    tops += [float(to_display(float(ln["value"]), kind, system)) for ln in limit_lines
             if ln.get("value") is not None]
    if tops:  # reference zones far above the levels are clipped (zoom out to see them)
        layout["yaxis"]["range"] = [0, 1.25 * max(tops)]
    u = display_unit(kind, system).replace("um", "µm")
    ytitle = (f"amplitude ({u} pp)" if kind == "proximity"
              else f"amplitude ({u} rms; 1X as rms)")
    layout.update(legend={"orientation": "h", "yanchor": "top", "y": -0.18, "x": 0,
                          "xanchor": "left"}, margin={"l": 64, "r": 24, "t": 56, "b": 120})
    layout["xaxis"]["title"] = {"text": "speed (rpm)"}
    layout["yaxis"]["title"] = {"text": ytitle}
    return make_figure(data, layout)


def add_limit_lines(data, layout, limit_lines, kind, system) -> None:
    for ln in limit_lines:
        color = "#D55E00" if ln.get("verdict_line", True) else "#777777"
        if ln.get("value") is not None:
            x0, x1 = ln.get("applies_rpm") or (None, None)
            y = float(to_display(float(ln["value"]), kind, system))
            if x0 is None:
                add_hline(layout, y, {"color": color, "dash": "longdash", "width": 1.5},
                       text=limit_label(ln, kind, system))
            else:
                data.append({"type": "scatter", "x": [x0, x1], "y": [y, y],
                             "mode": "lines+text", "name": limit_label(ln, kind, system),
                             "meta": "limit",
                             "line": {"color": color, "dash": "longdash", "width": 2},
                             "text": ["", limit_label(ln, kind, system)],
                             "textposition": "top left", "textfont": {"size": 10},
                             "hovertext": ln.get("source", ""), "hoverinfo": "text"})
        elif ln.get("speed_rpm") is not None:
            y = np.asarray(to_display(np.asarray(ln["values"], float), kind, system))
            data.append({"type": "scatter", "x": list(ln["speed_rpm"]), "y": y.tolist(),
                         "mode": "lines", "name": ln.get("label", "zone"), "meta": "limit",
                         "line": {"color": "#999999", "dash": "dot", "width": 1},
                         "hovertext": ln.get("source", ""), "hoverinfo": "text+name"})


def guidance_lines(profile, *, kind: str, max_continuous_speed_rpm: float,
                   speed_range_rpm: tuple[float, float], include_reference_zones: bool = True
                   ) -> list[dict[str, Any]]:
    """Limit lines of a guidance profile (and reference zones) for one transducer kind.

    Parameters
    ----------
    profile : Profile
        A loaded profile (:func:`rundash.ingest.profile_file.load_profile`).
    kind : str
        Transducer kind of the probe shown.
    max_continuous_speed_rpm : float
        N_mc of the machine (speed-dependent limits use it).
    speed_range_rpm : (float, float)
        Speeds to draw speed-dependent zones over.

    Returns
    -------
    list of dict
        ``{'label', 'measure' ('direct'|'1X'), 'value' (storage units) or 'speed_rpm' and
        'values', 'source', 'verdict_line'}``; a profile limit that applies at top speed
        only carries ``applies_rpm`` (its speed span). ISO shaft zones (proximity) are
        reference lines (``verdict_line`` False): they are meant for steady operation.
    """
    from rundash.analysis.limits import shaft_zone_boundaries_um_pp
    from rundash.analysis.profiles import as_profile
    from rundash.analysis.zones import SHAFT_DISPLACEMENT, cite as zone_cite

    prof = as_profile(profile)
    out: list[dict[str, Any]] = []
    for lim in prof.limits:
        if lim.transducer != kind:
            continue
        value = lim.value(max_continuous_speed_rpm)
        unit = "µm pp" if kind == "proximity" else "mm/s rms"
        line: dict[str, Any] = {
            "label": f"{lim.title}: {value:.1f} {unit}", "title": lim.title, "id": lim.id,
            "measure": "1X" if lim.quantity.lower() == "1x" else "direct", "value": value,
            "source": lim.source.cite(), "verdict_line": True}
        if lim.applies == "top-speed":
            line["applies_rpm"] = (0.9 * max_continuous_speed_rpm,
                                   max(speed_range_rpm[1], max_continuous_speed_rpm))
        out.append(line)
    if include_reference_zones and kind == "proximity":
        lo = max(speed_range_rpm[0], 1.0)
        n = np.linspace(max(lo, 0.25 * speed_range_rpm[1]), speed_range_rpm[1], 60)
        cite = zone_cite(SHAFT_DISPLACEMENT)
        for name, curve in zip(("A/B", "B/C", "C/D"), shaft_zone_boundaries_um_pp(n)):
            out.append({"label": f"ISO zone {name} (reference, steady operation)",
                        "measure": "direct", "speed_rpm": n.tolist(), "values": curve.tolist(),
                        "source": cite, "verdict_line": False})
    return out
