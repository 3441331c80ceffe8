"""Figures of the live monitor: Bode and polar plots of the 1X vectors as they arrive,
with the critical bands expected from earlier runs."""

from __future__ import annotations

from typing import Any, Sequence

import plotly.graph_objects as go

from rundash.units import amplitude_label


def live_bode_polar(tracks: Sequence[Any] = (), bands: Sequence[Sequence[float]] = ()
                    ) -> tuple[go.Figure, go.Figure]:
    """Bode (amplitude and phase lag against speed) and polar figures of the live 1X.

    ``tracks`` have ``probe_name``, ``kind``, ``speed_rpm``, ``amplitude`` (storage
    units) and ``phase_lag_deg``; ``bands`` are ``(lo_rpm, critical_rpm, hi_rpm)``.
    """
    from plotly.subplots import make_subplots

    bode = make_subplots(rows=2, cols=1, shared_xaxes=True, vertical_spacing=0.06)
    polar = go.Figure()
    for lo, crit, hi in bands:
        for row in (1, 2):
            bode.add_vrect(x0=lo, x1=hi, fillcolor="rgba(200,120,0,0.15)", line_width=0,
                           row=row, col=1, exclude_empty_subplots=False)
        bode.add_annotation(x=crit, y=1.0, yref="paper", text=f"expected {crit:.0f} rpm",
                            showarrow=False)
    for tr in tracks:
        bode.add_scatter(x=tr.speed_rpm, y=tr.amplitude, mode="lines", name=tr.probe_name,
                         row=1, col=1)
        bode.add_scatter(x=tr.speed_rpm, y=tr.phase_lag_deg, mode="markers",
                         marker={"size": 3}, name=f"{tr.probe_name} lag", showlegend=False,
                         row=2, col=1)
        bode.update_yaxes(title_text=f"1X ({amplitude_label(tr.kind)})", row=1, col=1)
        polar.add_scatterpolar(r=tr.amplitude, theta=tr.phase_lag_deg, mode="lines",
                               name=tr.probe_name)
    bode.update_yaxes(title_text="phase lag (deg)", range=[0, 360], row=2, col=1)
    bode.update_xaxes(title_text="speed (rpm)", row=2, col=1)
    bode.update_layout(height=460, margin={"t": 30, "b": 40, "l": 60, "r": 20},
                       uirevision="live")
    polar.update_layout(height=460, margin={"t": 30, "b": 30}, uirevision="live",
                        polar={"angularaxis": {"direction": "clockwise"}})
    return bode, polar
