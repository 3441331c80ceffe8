"""Figures of the live monitor: Bode and polar plots of the 1X vectors as they arrive,
with the critical bands expected from earlier runs.

One amplitude axis per unit (µm pp of proximity probes, mm/s pk of velocity probes, ...:
never two conventions on one axis), the phase lag 0–360° below them; a probe keeps one
colour for its amplitude, its phase and its polar curve. The phase is not drawn where the
amplitude is below :data:`~rundash.figures.common.PHASE_FLOOR_FRACTION` of the probe's
peak so far. The polar plot turns with the machine's rotation as the review page's does.
"""

from __future__ import annotations

from typing import Any, Sequence

import numpy as np
import plotly.graph_objects as go

from rundash.figures.common import (
    PALETTE, PHASE_FLOOR_NOTE, UnitSystem, base_layout, blank_weak_phase, break_at_wraps,
    make_figure, message_figure, polar_layout, typed_array,
)
from rundash.units import amplitude_label, to_display

EMPTY_MESSAGE = "No 1X vectors recorded yet: the plots fill in as the run arrives"
HEIGHT_PX = 460


def live_bode_polar(tracks: Sequence[Any] = (), bands: Sequence[Sequence[float]] = (), *,
                    rotation: str = "ccw", system: UnitSystem = "metric",
                    empty_message: str = EMPTY_MESSAGE) -> tuple[go.Figure, go.Figure]:
    """Bode (amplitude per unit and phase lag against speed) and polar figures of the
    live 1X.

    ``tracks`` have ``probe_name``, ``kind``, ``speed_rpm``, ``amplitude`` (storage
    units) and ``phase_lag_deg``; ``bands`` are ``(lo_rpm, critical_rpm, hi_rpm)``;
    ``rotation`` is the machine's (``'cw'`` or ``'ccw'`` viewed from the driver end).
    With no vector to draw both figures say ``empty_message`` instead of showing empty
    axes. The polar plot shows the probes of the first unit (the Bode's top axis).
    """
    tracks = [t for t in tracks if len(t.speed_rpm)]
    if not tracks:
        return (message_figure(empty_message, title="Bode plot, 1X (live)", height=HEIGHT_PX),
                message_figure(empty_message, title="Polar plot, 1X (live)", height=HEIGHT_PX))
    units = list(dict.fromkeys(amplitude_label(t.kind, system) for t in tracks))
    n_amp = len(units)
    rows = n_amp + 1
    gap = 0.05
    heights = [1.0] * n_amp + [0.8]
    total = sum(heights)
    usable = 1.0 - gap * (rows - 1)
    domains, top = [], 1.0
    for h in heights:  # top to bottom
        span = usable * h / total
        domains.append([max(0.0, top - span), top])
        top -= span + gap
    layout = base_layout("Bode plot, 1X (live)", "live", HEIGHT_PX + 140 * (n_amp - 1))
    axis = layout.pop("xaxis")
    layout.pop("yaxis")
    phase_ax = rows  # axis index of the phase panel
    for k in range(1, rows + 1):
        sfx = "" if k == 1 else str(k)
        layout[f"xaxis{sfx}"] = dict(axis, anchor=f"y{sfx}", domain=[0.0, 1.0],
                                     showticklabels=k == rows,
                                     **({"matches": f"x{phase_ax}"} if k != rows else {}),
                                     **({"title": {"text": "speed (rpm)"}} if k == rows else {}))
        title = f"1X ({units[k - 1]})" if k <= n_amp else "phase lag (deg)"
        layout[f"yaxis{sfx}"] = dict(axis, anchor=f"x{sfx}", domain=domains[k - 1],
                                     title={"text": title})
        if k <= n_amp:
            layout[f"yaxis{sfx}"]["rangemode"] = "tozero"
    psfx = str(phase_ax)
    layout[f"yaxis{psfx}"].update(range=[0, 360], tickvals=[0, 90, 180, 270, 360])
    layout["annotations"].append({
        "text": "lag 0–360°; " + PHASE_FLOOR_NOTE, "xref": f"x{psfx} domain",
        "yref": f"y{psfx} domain", "x": 0.0, "y": 1.0, "xanchor": "left",
        "yanchor": "bottom", "showarrow": False, "font": {"size": 10, "color": "#666666"}})
    layout["legend"] = {"orientation": "h", "yanchor": "bottom", "y": 1.0, "xanchor": "right",
                        "x": 1.0, "font": {"size": 11}}
    layout["margin"] = {"l": 64, "r": 24, "t": 60, "b": 48}
    for lo, crit, hi in bands:
        for k in range(1, rows + 1):
            sfx = "" if k == 1 else str(k)
            layout["shapes"].append({"type": "rect", "xref": f"x{sfx}",
                                     "yref": f"y{sfx} domain", "x0": lo, "x1": hi, "y0": 0,
                                     "y1": 1, "fillcolor": "rgba(230,159,0,0.18)",
                                     "line": {"width": 0}, "layer": "below"})
        layout["annotations"].append({"text": f"expected {crit:,.0f} rpm", "x": crit,
                                      "xref": "x", "y": 1.0, "yref": "y domain",
                                      "yanchor": "bottom", "showarrow": False,
                                      "font": {"size": 10}})

    data, pdata = [], []
    colours: dict[str, str] = {}
    for tr in tracks:
        colour = colours.setdefault(tr.probe_name, PALETTE[len(colours) % len(PALETTE)])
        unit = amplitude_label(tr.kind, system)
        k = units.index(unit) + 1
        sfx = "" if k == 1 else str(k)
        rpm = np.asarray(tr.speed_rpm, dtype=float)
        amp = np.asarray(to_display(np.asarray(tr.amplitude, dtype=float), tr.kind, system))
        lag = blank_weak_phase(tr.phase_lag_deg, amp)
        px, py = break_at_wraps(rpm, lag)
        group = f"probe {tr.probe_name}"
        data.append({"type": "scatter", "mode": "lines", "x": typed_array(rpm),
                     "y": typed_array(amp),
                     "xaxis": f"x{sfx}", "yaxis": f"y{sfx}", "name": tr.probe_name,
                     "legendgroup": group, "meta": "data", "line": {"color": colour,
                                                                      "width": 2},
                     "hovertemplate": "%{x:.0f} rpm<br>%{y:.3g} " + unit
                     + f"<extra>{tr.probe_name}</extra>"})
        data.append({"type": "scatter", "mode": "lines", "x": typed_array(px), "y": typed_array(py),
                     "xaxis": f"x{psfx}", "yaxis": f"y{psfx}", "name": f"{tr.probe_name} lag",
                     "legendgroup": group, "showlegend": False, "meta": "phase",
                     "line": {"color": colour, "width": 1.4},
                     "hovertemplate": "%{x:.0f} rpm<br>%{y:.0f}° lag"
                     + f"<extra>{tr.probe_name}</extra>"})
        if k == 1:
            pdata.append({"type": "scatterpolar", "mode": "lines", "r": typed_array(amp),
                          "theta": typed_array(tr.phase_lag_deg),
                          "name": tr.probe_name, "meta": "data", "line": {"color": colour,
                                                                            "width": 2},
                          "customdata": typed_array(rpm),
                          "hovertemplate": "%{customdata:.0f} rpm<br>%{r:.3g} " + unit
                          + " ∠ %{theta:.0f}°<extra>" + tr.probe_name + "</extra>"})
    bode = make_figure(data, layout)

    play = polar_layout(f"Polar plot, 1X (live, {units[0]})", "live", HEIGHT_PX,
                        rotation=rotation, bottom=0.06)
    note = f"radius {units[0]}; angle: phase lag, rising against {rotation} rotation"
    if n_amp > 1:
        note += f"; {', '.join(units[1:])} on the Bode only"
    play["annotations"].append({"text": note, "xref": "paper", "yref": "paper", "x": 0,
                                "y": 0.0, "xanchor": "left", "yanchor": "top",
                                "showarrow": False, "font": {"size": 10}})
    play["margin"] = {"l": 40, "r": 40, "t": 60, "b": 40}
    return bode, make_figure(pdata, play)
