"""Frequency against speed: the cascade of spectra and the Campbell diagram."""

from __future__ import annotations

import math
from typing import Any, Mapping, Sequence

import numpy as np
import plotly.graph_objects as go

from rundash.figures.common import (
    INK, PALETTE, UnitSystem, add_hline, add_operating_shapes, base_layout, critical_hover,
    direction_style, make_figure, order_name, typed_array,
)
from rundash.units import amplitude_label, to_display


# ----------------------------------------------------------------------------- cascade
def _pool(a: np.ndarray, axis: int, max_n: int) -> tuple[np.ndarray, np.ndarray]:
    """Max-pool ``a`` along ``axis`` to at most ``max_n``; returns (pooled, first index)."""
    n = a.shape[axis]
    if n <= max_n:
        return a, np.arange(n)
    f = int(math.ceil(n / max_n))
    starts = np.arange(0, n, f)
    return np.maximum.reduceat(a, starts, axis=axis), starts


def cascade(speed_rpm, freq_hz, amplitude, *, kind: str = "proximity",
            system: UnitSystem = "metric", orders: Sequence[float] = (1, 2, 3, 4),
            probe: str = "", max_rows: int = 200, max_bins: int = 400,
            title: str | None = None, uirevision: Any = None) -> go.Figure:
    """Cascade of spectra versus speed as a colour map, with order lines.

    Parameters
    ----------
    speed_rpm : array_like, shape (n_rows,)
        Speed of each spectrum row.
    freq_hz : array_like, shape (n_freq,)
    amplitude : array_like, shape (n_rows, n_freq)
        Peak amplitude per bin (storage units); shown as p-p (2 x peak) for proximity
        probes, peak otherwise.
    orders : sequence of float
        Order lines ``f = n * speed / 60`` drawn over the map.
    max_rows, max_bins : int
        Large cascades are max-pooled down to this size for drawing (peaks survive).
    """
    rpm = np.asarray(speed_rpm, dtype=float)
    f = np.asarray(freq_hz, dtype=float)
    a = np.asarray(amplitude, dtype=float) * (2.0 if kind == "proximity" else 1.0)
    a = np.asarray(to_display(a, kind, system))
    order = np.argsort(rpm, kind="stable")
    rpm, a = rpm[order], a[order]
    a, ri = _pool(a, 0, max_rows)
    a, fi = _pool(a, 1, max_bins)
    rpm, f = rpm[ri], f[fi]
    unit = amplitude_label(kind, system)
    # log colour scale over three decades below the peak, so that small orders show
    peak = float(np.nanmax(a)) if a.size and np.nanmax(a) > 0 else 1.0
    floor = peak * 1e-3
    zlog = np.log10(np.maximum(a, floor))
    decades = np.arange(math.floor(math.log10(floor)), math.ceil(math.log10(peak)) + 1)
    data: list[dict] = [{
        "type": "heatmap", "x": typed_array(f), "y": typed_array(rpm),
        # float32 typed arrays: a quarter of the JSON of number lists (~0.9 MB for a
        # 200 x 400 map), decoded without parsing
        "z": typed_array(zlog, "f4"), "customdata": typed_array(a, "f4"),
        "colorscale": "Cividis", "meta": "data",
        "zmin": math.log10(floor), "zmax": math.log10(peak),
        "colorbar": {"title": {"text": unit + " (log)", "side": "right"}, "thickness": 14,
                     "ticklabeloverflow": "allow",
                     "tickvals": decades.tolist(),
                     "ticktext": [f"{10.0 ** d:g}" for d in decades]},
        "hovertemplate": "%{x:.1f} Hz<br>%{y:.0f} rpm<br>%{customdata:.3g} " + unit
        + "<extra></extra>"}]
    top = float(rpm.max()) if rpm.size else 1.0
    fmax = float(f.max()) if f.size else 1.0
    for o in orders:
        n_end = min(top, 60.0 * fmax / o)
        data.append({"type": "scatter", "x": [0, o * n_end / 60.0], "y": [0, n_end],
                     "mode": "lines+text", "name": f"{order_name(o)} line", "meta": "order",
                     "text": ["", order_name(o)], "cliponaxis": False,
                     # at the top edge the label sits above the line's end, not cut in half
                     "textposition": "top center" if n_end >= top else "middle right",
                     "line": {"color": "white", "width": 1, "dash": "dot"},
                     "textfont": {"color": INK, "size": 11}, "showlegend": False,
                     "hoverinfo": "skip"})
    layout = base_layout(title or f"Cascade {probe}".strip(), uirevision, 460)
    shown_f = min(fmax, 1.5 * max(orders or [1]) * top / 60.0)
    layout["xaxis"].update(title={"text": "frequency (Hz)"}, range=[0, shown_f], showgrid=False)
    layout["yaxis"].update(title={"text": "speed (rpm)"},
                           range=[float(rpm.min()) if rpm.size else 0, top], showgrid=False)
    return make_figure(data, layout)


# ----------------------------------------------------------------------------- campbell
def campbell(max_speed_rpm: float, *, orders: Sequence[float] = (1, 2, 3, 4),
             criticals: Sequence[Mapping[str, Any]] = (),
             natural_frequencies_hz: Sequence[float] = (),
             operating: Mapping[str, float] | None = None, title: str | None = None,
             uirevision: Any = None) -> go.Figure:
    """Campbell (interference) diagram: excitation order lines against speed.

    Order lines are ``f = n N / 60`` (Hz, N in rpm). Identified criticals are marked on
    the 1X line at ``(N_c, N_c / 60)``. Each natural frequency the user enters is a
    horizontal line; its crossings with the order lines (``N = 60 f / n``) are marked as
    interference points, with their speed in the hover text.
    """
    top = float(max_speed_rpm) * 1.15
    data: list[dict] = []
    for k, o in enumerate(orders):
        data.append({"type": "scatter", "x": [0, top], "y": [0, o * top / 60.0],
                     "mode": "lines+text", "name": f"{order_name(o)}", "meta": "order",
                     "text": ["", order_name(o)], "textposition": "top left",
                     "cliponaxis": False,
                     "line": {"color": PALETTE[k % len(PALETTE)], "width": 1.5}})
    fmax = max(orders) * top / 60.0 if orders else top / 60.0
    layout = base_layout(title or "Campbell (interference) diagram", uirevision, 460)
    add_operating_shapes(layout, operating)
    crit = [c for c in criticals if c.get("speed_rpm")]
    if crit:
        data.append({
            "type": "scatter", "x": [c["speed_rpm"] for c in crit],
            "y": [c["speed_rpm"] / 60.0 for c in crit], "mode": "markers",
            "name": "critical speeds (measured, 1X)", "meta": "critical",
            "marker": {"size": 11, "color": INK,
                       "symbol": [direction_style(c.get("direction"))["symbol"] for c in crit]},
            "hovertext": [critical_hover(c) for c in crit], "hoverinfo": "text"})
    xs, ys, tx = [], [], []
    for fn in natural_frequencies_hz:
        add_hline(layout, fn, {"color": "#CC79A7", "dash": "dash", "width": 1.5},
               text=f"natural frequency {fn:g} Hz")
        for o in orders:
            n = 60.0 * fn / o
            if n <= top:
                xs.append(n)
                ys.append(fn)
                tx.append(f"{order_name(o)} meets {fn:g} Hz at {n:.0f} rpm")
    if xs:
        data.append({"type": "scatter", "x": xs, "y": ys, "mode": "markers",
                     "name": "interference points", "meta": "interference", "hovertext": tx,
                     "hoverinfo": "text",
                     "marker": {"size": 9, "color": "#CC79A7", "symbol": "x"}})
    layout["xaxis"].update(title={"text": "speed (rpm)"}, range=[0, top])
    layout["yaxis"].update(title={"text": "frequency (Hz)"},
                           range=[0, max(fmax, *(list(natural_frequencies_hz) or [0])) * 1.05])
    return make_figure(data, layout)
