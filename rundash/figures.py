"""Pure figure builders: stored results (arrays and plain dicts) in, plotly Figures out.

Nothing here reads the database or knows Dash; the dashboard and the report call these
functions, and tests check them through ``fig.to_dict()``.

Public functions
----------------
bode              amplitude and phase lag versus speed, criticals, bands and zones
polar             the nX vector as a curve in the complex plane, speed labels, criticals
speed_time        speed versus time with the time spent inside each critical band
direct_vs_filtered  unfiltered level beside the 1X amplitude, with limit lines
cascade           spectra versus speed as a colour map, with order lines
campbell          interference diagram: order lines, criticals, natural frequencies
orbit             filtered 1X and unfiltered orbit of an X/Y pair, whirl direction
guidance_lines    limit lines and reference zones of a guidance profile for one probe kind
split_by_direction  cut a track into run-up / coast-down / hold pieces by segments
time_in_band      seconds a speed history spends inside a speed band
whirl_direction   forward or reverse whirl of an orbit

Conventions (see :mod:`rundash.conventions`): speeds in rpm, times in s from the record's
start, phase lag in degrees 0..360. Amplitudes are passed in storage units (um p-p for
proximity 1X, mm/s pk for velocity 1X; direct: um p-p or mm/s rms) with the transducer
``kind``; the display ``system`` ("metric" or "imperial") is applied here through
:func:`rundash.units.to_display` only.

Colours are the Okabe-Ito colour-blind-safe set (M. Okabe and K. Ito, "Color Universal
Design (CUD): how to make figures and presentations that are friendly to colorblind
people", J*FLY, 2008); run direction is carried by line dash and marker shape as well as
by the legend, never by colour alone.
"""

from __future__ import annotations

import math
from typing import Any, Iterable, Literal, Mapping, Sequence

import numpy as np
import plotly.graph_objects as go
from plotly.subplots import make_subplots

from rundash.units import amplitude_label, display_unit, to_display

UnitSystem = Literal["metric", "imperial"]

#: Okabe-Ito palette without black and yellow (too weak on white), in drawing order.
PALETTE = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000")
INK = "#2b2b2b"
GRID = "#e3e3e3"
#: Line dash and marker symbol per run direction.
DIRECTION_STYLE: dict[str, dict[str, str]] = {
    "run-up": {"dash": "solid", "symbol": "triangle-up"},
    "coast-down": {"dash": "dash", "symbol": "triangle-down"},
    "steady": {"dash": "dot", "symbol": "circle"},
    "mixed": {"dash": "dashdot", "symbol": "diamond"},
}
OPERATING_FILL = "rgba(0, 158, 115, 0.10)"   # bluish green, light
MARGIN_FILL = "rgba(213, 94, 0, 0.10)"       # vermillion, light
HALF_POWER_FILL = "rgba(0, 114, 178, 0.12)"  # blue, light
CURSOR_COLOR = "#000000"
MAX_POINTS = 2000


# ----------------------------------------------------------------------------- helpers
def _layout(fig: go.Figure, *, title: str, uirevision: Any = None, height: int = 420) -> None:
    fig.update_layout(
        title={"text": title, "x": 0.01, "xanchor": "left", "font": {"size": 15}},
        template="simple_white", font={"family": "Inter, 'Segoe UI', Arial, sans-serif",
                                       "size": 12, "color": INK},
        height=height, margin={"l": 64, "r": 24, "t": 56, "b": 48},
        legend={"orientation": "h", "yanchor": "bottom", "y": 1.0, "xanchor": "right",
                "x": 1.0, "font": {"size": 11}},
        hovermode="closest", uirevision=uirevision, paper_bgcolor="white",
        plot_bgcolor="white")
    fig.update_xaxes(showgrid=True, gridcolor=GRID, zeroline=False, ticks="outside")
    fig.update_yaxes(showgrid=True, gridcolor=GRID, zeroline=False, ticks="outside")


def _decimate_index(n: int, max_points: int, keep: Iterable[int] = ()) -> np.ndarray:
    """Indices of an even stride through ``n`` points, plus ``keep`` (e.g. the peak)."""
    if n <= max_points:
        return np.arange(n)
    idx = np.unique(np.concatenate([np.linspace(0, n - 1, max_points).astype(int),
                                    np.asarray(list(keep), dtype=int)]))
    return idx


def _direct_label(kind: str, system: UnitSystem) -> str:
    unit = display_unit(kind, system).replace("um", "µm")
    return f"{unit} {'pp' if kind == 'proximity' else 'rms'}"


def _fmt(x: Any, digits: int = 0, unit: str = "") -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "–"
    return f"{x:,.{digits}f}{(' ' + unit) if unit else ''}"


def _nearest(speed_rpm: np.ndarray, target: float) -> int:
    return int(np.nanargmin(np.abs(np.asarray(speed_rpm, dtype=float) - target)))


def _critical_label(c: Mapping[str, Any]) -> str:
    af = c.get("af_governing")
    return f"{_fmt(c.get('speed_rpm'))} rpm" + (f", AF {af:.1f}" if af is not None else "")


def _critical_hover(c: Mapping[str, Any]) -> str:
    parts = [f"<b>critical {_fmt(c.get('speed_rpm'))} rpm</b> ({c.get('direction', '?')})",
             f"probe {c.get('probe', '?')}",
             f"AF {_fmt(c.get('af_governing'), 1)} ({c.get('af_method') or 'method ?'})",
             f"margin {_fmt(c.get('separation_margin_pct'), 1, '%')} found, "
             f"{_fmt(c.get('required_margin_pct'), 1, '%')} required: "
             f"{c.get('margin_verdict') or '–'}",
             f"confidence {c.get('confidence') or '–'}"]
    return "<br>".join(parts)


def split_by_direction(time_s, segments: Sequence[Mapping[str, Any]] | None
                       ) -> list[tuple[str, np.ndarray]]:
    """Cut a track into pieces by the run's segments.

    Parameters
    ----------
    time_s : array_like, shape (n,)
        Track times in s.
    segments : sequence of dict
        Each with ``kind`` and ``t_start_s``/``t_end_s`` (as stored by processing).

    Returns
    -------
    list of (kind, index array)
        One entry per segment that holds points, in time order; points outside every
        segment are returned as ``'mixed'`` when there are no segments at all.
    """
    t = np.asarray(time_s, dtype=float)
    if not segments:
        return [("mixed", np.arange(t.size))]
    segments = _merge_segments(segments)
    out = []
    for i, s in enumerate(segments):
        last = i == len(segments) - 1
        hi = t <= s["t_end_s"] if last else t < s["t_end_s"]
        idx = np.flatnonzero((t >= s["t_start_s"] if i else True) & hi)
        if idx.size:
            out.append((str(s.get("kind", "mixed")), idx))
    return out


def _merge_segments(segments):
    """Join pieces of one sweep: a hold between two segments of the same direction takes
    that direction, and neighbours of the same kind become one segment (drawing only)."""
    kinds = [str(s.get("kind", "mixed")) for s in segments]
    for i in range(1, len(kinds) - 1):
        if kinds[i] == "steady" and kinds[i - 1] == kinds[i + 1] != "steady":
            kinds[i] = kinds[i - 1]
    merged: list[dict] = []
    for s, k in zip(segments, kinds):
        if merged and merged[-1]["kind"] == k:
            merged[-1]["t_end_s"] = s["t_end_s"]
        else:
            merged.append({"kind": k, "t_start_s": s["t_start_s"], "t_end_s": s["t_end_s"]})
    return merged


def time_in_band(time_s, speed_rpm, lo_rpm: float, hi_rpm: float) -> float:
    """Seconds a speed history spends with ``lo_rpm <= speed <= hi_rpm``.

    Each sample interval counts when both ends lie inside the band (trapezoid-free count
    of whole intervals; resolution is the sample spacing).
    """
    t = np.asarray(time_s, dtype=float)
    n = np.asarray(speed_rpm, dtype=float)
    if t.size < 2:
        return 0.0
    inside = (n >= lo_rpm) & (n <= hi_rpm)
    both = inside[:-1] & inside[1:]
    return float(np.sum(np.diff(t)[both]))


def whirl_direction(u, v) -> Literal["ccw", "cw"]:
    """Sense in which a closed orbit is traversed on screen (signed shoelace area)."""
    u = np.asarray(u, dtype=float)
    v = np.asarray(v, dtype=float)
    area = 0.5 * np.sum(u * np.roll(v, -1) - np.roll(u, -1) * v)
    return "ccw" if area > 0 else "cw"


def _operating_shapes(fig, op: Mapping[str, float] | None, *, row=None, label=True) -> None:
    if not op or op.get("min_operating_speed_rpm") is None:
        return
    lo, hi = op["min_operating_speed_rpm"], op["max_continuous_speed_rpm"]
    kw: dict[str, Any] = {"row": row, "col": 1} if row else {}
    ann = {"annotation_text": "operating range", "annotation_position": "top left",
           "annotation_font_size": 10} if label else {}
    fig.add_vrect(x0=lo, x1=hi, fillcolor=OPERATING_FILL, line_width=0, layer="below",
                  **ann, **kw)
    trip = op.get("trip_speed_rpm")
    if trip:
        ann = {"annotation_text": "trip", "annotation_position": "top right",
               "annotation_font_size": 10} if label else {}
        fig.add_vline(x=trip, line={"color": "#777777", "dash": "dot", "width": 1}, **ann, **kw)


def margin_zones(criticals: Sequence[Mapping[str, Any]], op: Mapping[str, float] | None
                 ) -> list[dict[str, float | str]]:
    """Speed zones a critical should stay out of, from each side's largest requirement.

    Below: ``[N_min (1 - SM/100), N_min]``; above: ``[N_mc, N_mc (1 + SM/100)]`` with SM
    the required margin in percent stated by the findings (the profile's rule).
    """
    if not op or op.get("min_operating_speed_rpm") is None:
        return []
    req = {"below": 0.0, "above": 0.0}
    for c in criticals:
        side, pct = c.get("margin_side"), c.get("required_margin_pct")
        if side in req and pct:
            req[side] = max(req[side], float(pct))
    zones = []
    if req["below"] > 0:
        n = op["min_operating_speed_rpm"]
        zones.append({"side": "below", "pct": req["below"], "lo_rpm": n * (1 - req["below"] / 100),
                      "hi_rpm": n})
    if req["above"] > 0:
        n = op["max_continuous_speed_rpm"]
        zones.append({"side": "above", "pct": req["above"], "lo_rpm": n,
                      "hi_rpm": n * (1 + req["above"] / 100)})
    return zones


# ----------------------------------------------------------------------------- bode
def bode(traces: Sequence[Mapping[str, Any]], *, kind: str = "proximity",
         system: UnitSystem = "metric", criticals: Sequence[Mapping[str, Any]] = (),
         operating: Mapping[str, float] | None = None,
         limit_lines: Sequence[Mapping[str, Any]] = (), cursor_rpm: float | None = None,
         compensated: bool = True, title: str | None = None, uirevision: Any = None,
         max_points: int = MAX_POINTS) -> go.Figure:
    """Bode plot: nX amplitude (top) and phase lag (bottom) versus speed.

    Parameters
    ----------
    traces : sequence of dict
        Each with ``speed_rpm``, ``amplitude`` (storage units), ``phase_lag_deg`` (arrays
        of one shape), ``probe``, ``order`` and ``direction`` (``'run-up'``,
        ``'coast-down'``, ``'steady'`` or ``'mixed'``); optional ``color``.
    kind : {'proximity', 'velocity', 'acceleration'}
        Transducer kind of the amplitudes (sets units and pp/pk).
    system : {'metric', 'imperial'}
    criticals : sequence of dict
        Findings' critical entries; each is marked at its ``speed_rpm`` (vertical line in
        both panels, a marker on the amplitude), its half-power band ``n1_rpm..n2_rpm``
        shaded. Only criticals of the probes shown are drawn.
    operating : dict, optional
        ``min_operating_speed_rpm``, ``max_continuous_speed_rpm``, ``trip_speed_rpm``;
        draws the operating range and the required-margin zones (:func:`margin_zones`).
    limit_lines : sequence of dict
        From :func:`guidance_lines`; those with ``measure == '1X'`` are drawn.
    cursor_rpm : float, optional
        A speed to mark (the linked cursor).
    compensated : bool
        Only labels the axis (the caller picks the stored tracks).

    Returns
    -------
    plotly.graph_objects.Figure
        Data traces carry ``meta='data'`` and speeds in ``customdata``; the critical
        markers are the trace named ``'critical speeds'``; the last two traces are the
        cursor (``meta='cursor'``).
    """
    fig = make_subplots(rows=2, cols=1, shared_xaxes=True, vertical_spacing=0.06,
                        row_heights=[0.58, 0.42])
    colors: dict[tuple, str] = {}
    shown_probes = []
    seen_legend: set[tuple] = set()
    for tr in traces:
        key = (tr["probe"], tr["order"])
        if key not in colors:
            colors[key] = tr.get("color") or PALETTE[len(colors) % len(PALETTE)]
        if tr["probe"] not in shown_probes:
            shown_probes.append(tr["probe"])
        rpm = np.asarray(tr["speed_rpm"], dtype=float)
        amp = np.asarray(to_display(np.asarray(tr["amplitude"], dtype=float), kind, system))
        lag = np.asarray(tr["phase_lag_deg"], dtype=float)
        if rpm.size == 0:
            continue
        idx = _decimate_index(rpm.size, max_points, keep=[int(np.nanargmax(amp))])
        style = DIRECTION_STYLE.get(tr.get("direction", "mixed"), DIRECTION_STYLE["mixed"])
        name = f"{tr['probe']} {_order_name(tr['order'])} {tr.get('direction', '')}".strip()
        line = {"color": colors[key], "dash": style["dash"],
                "width": 2.0 if tr["order"] == 1 else 1.4}
        lg = (key, tr.get("direction"))
        common = dict(mode="lines", line=line, name=name, legendgroup=name, meta="data",
                      customdata=rpm[idx])
        fig.add_trace(go.Scatter(x=rpm[idx], y=amp[idx], showlegend=lg not in seen_legend,
                                   hovertemplate="%{x:.0f} rpm<br>%{y:.3g} " +
                                   amplitude_label(kind, system) + f"<extra>{name}</extra>",
                                   **common), row=1, col=1)
        fig.add_trace(go.Scatter(x=rpm[idx], y=lag[idx], showlegend=False,
                                   hovertemplate="%{x:.0f} rpm<br>%{y:.0f}° lag"
                                   f"<extra>{name}</extra>", **common), row=2, col=1)
        seen_legend.add(lg)

    _operating_shapes(fig, operating, row=1)
    _operating_shapes(fig, operating, row=2, label=False)
    for z in margin_zones(criticals, operating):
        for row in (1, 2):
            ann = {"annotation_text": f"required margin {z['pct']:.1f} %",
                   "annotation_position": "bottom left" if z["side"] == "below"
                   else "bottom right", "annotation_font_size": 10} if row == 1 else {}
            fig.add_vrect(x0=z["lo_rpm"], x1=z["hi_rpm"], fillcolor=MARGIN_FILL, line_width=0,
                          layer="below", row=row, col=1, **ann)
    shown = [c for c in criticals if c.get("probe") in shown_probes and c.get("speed_rpm")]
    for c in shown:
        if c.get("n1_rpm") and c.get("n2_rpm"):
            fig.add_vrect(x0=c["n1_rpm"], x1=c["n2_rpm"], fillcolor=HALF_POWER_FILL,
                          line_width=0, layer="below", row=1, col=1)
        for row in (1, 2):
            fig.add_vline(x=c["speed_rpm"], line={"color": INK, "dash": "dot", "width": 1},
                          row=row, col=1)
    if shown:
        amps = [to_display(float(c["peak_amplitude"]), kind, system)
                if c.get("peak_amplitude") is not None else None for c in shown]
        ymax = max([a for a in amps if a is not None] or [1.0])
        fig.add_trace(go.Scatter(
            x=[c["speed_rpm"] for c in shown], y=[a if a is not None else ymax for a in amps],
            mode="markers+text", name="critical speeds", meta="critical",
            text=[_critical_label(c) for c in shown], textposition="top center",
            textfont={"size": 11},
            marker={"symbol": [DIRECTION_STYLE.get(c.get("direction"), DIRECTION_STYLE["mixed"])
                               ["symbol"] for c in shown], "size": 11, "color": INK,
                    "line": {"color": "white", "width": 1}},
            customdata=[[i, c["speed_rpm"]] for i, c in enumerate(shown)],
            hovertext=[_critical_hover(c) for c in shown], hoverinfo="text"), row=1, col=1)
    for ln in limit_lines:
        if ln.get("measure") == "1X" and ln.get("value") is not None:
            fig.add_hline(y=to_display(float(ln["value"]), kind, system), row=1, col=1,
                          line={"color": "#D55E00", "dash": "longdash", "width": 1.5},
                          annotation_text=ln.get("label", "limit"), annotation_font_size=10)
    _add_bode_cursor(fig, traces, kind, system, cursor_rpm)
    comp = "slow-roll compensated" if compensated else "uncompensated"
    _layout(fig, title=title or f"Bode plot ({comp})", uirevision=uirevision, height=560)
    fig.update_layout(hovermode="x")  # a hover anywhere at a speed reads every trace there
    fig.update_yaxes(title_text=f"amplitude ({amplitude_label(kind, system)})", row=1, col=1,
                     rangemode="tozero")
    fig.update_yaxes(title_text="phase lag (deg)", row=2, col=1, range=[0, 360],
                     tickvals=[0, 90, 180, 270, 360])
    fig.update_xaxes(title_text="speed (rpm)", row=2, col=1)
    return fig


def _order_name(order: float) -> str:
    return f"{order:g}X"


def _add_bode_cursor(fig, traces, kind, system, cursor_rpm) -> None:
    xs, ya, yp = [], [], []
    if cursor_rpm is not None and traces:
        tr = traces[0]
        i = _nearest(tr["speed_rpm"], cursor_rpm)
        xs = [float(tr["speed_rpm"][i])]
        ya = [float(to_display(float(tr["amplitude"][i]), kind, system))]
        yp = [float(tr["phase_lag_deg"][i])]
    mk = {"symbol": "circle-open", "size": 14, "color": CURSOR_COLOR, "line": {"width": 2}}
    fig.add_trace(go.Scatter(x=xs, y=ya, mode="markers", marker=mk, name="cursor",
                             meta="cursor", showlegend=False, hoverinfo="skip"), row=1, col=1)
    fig.add_trace(go.Scatter(x=xs, y=yp, mode="markers", marker=mk, name="cursor",
                             meta="cursor", showlegend=False, hoverinfo="skip"), row=2, col=1)


# ----------------------------------------------------------------------------- polar
def _nice_step(span: float, n: int = 8) -> float:
    raw = max(span / n, 1e-9)
    mag = 10 ** math.floor(math.log10(raw))
    for m in (1, 2, 2.5, 5, 10):
        if raw <= m * mag:
            return m * mag
    return 10 * mag


def polar(traces: Sequence[Mapping[str, Any]], *, kind: str = "proximity",
          system: UnitSystem = "metric", rotation: str = "ccw",
          criticals: Sequence[Mapping[str, Any]] = (), cursor_rpm: float | None = None,
          label_step_rpm: float | None = None, title: str | None = None,
          uirevision: Any = None, max_points: int = MAX_POINTS) -> go.Figure:
    """Polar plot of the nX vector: amplitude as radius, phase lag as angle.

    0 deg lag is at the top; lag increases against the direction of rotation (clockwise
    on screen for a ``'ccw'`` machine; common practice, no source). Speed labels are
    placed along each curve every ``label_step_rpm`` (a round step giving about eight
    labels when None); criticals are marked on the curve of their probe and direction.

    Parameters are those of :func:`bode` (the same ``traces`` dicts).
    """
    fig = go.Figure()
    colors: dict[tuple, str] = {}
    all_rpm = np.concatenate([np.asarray(t["speed_rpm"], float) for t in traces]) \
        if traces else np.array([0.0, 1.0])
    step = label_step_rpm or _nice_step(float(np.ptp(all_rpm)) if all_rpm.size else 1.0)
    for tr in traces:
        key = (tr["probe"], tr["order"])
        colors.setdefault(key, tr.get("color") or PALETTE[len(colors) % len(PALETTE)])
        rpm = np.asarray(tr["speed_rpm"], dtype=float)
        if rpm.size == 0:
            continue
        amp = np.asarray(to_display(np.asarray(tr["amplitude"], float), kind, system))
        lag = np.asarray(tr["phase_lag_deg"], dtype=float)
        idx = _decimate_index(rpm.size, max_points)
        style = DIRECTION_STYLE.get(tr.get("direction", "mixed"), DIRECTION_STYLE["mixed"])
        name = f"{tr['probe']} {_order_name(tr['order'])} {tr.get('direction', '')}".strip()
        fig.add_trace(go.Scatterpolar(
            r=amp[idx], theta=lag[idx], mode="lines", name=name, meta="data",
            customdata=rpm[idx], line={"color": colors[key], "dash": style["dash"], "width": 2},
            hovertemplate="%{customdata:.0f} rpm<br>%{r:.3g} " + amplitude_label(kind, system)
            + " ∠ %{theta:.0f}°<extra>" + name + "</extra>"))
        # speed labels where the curve crosses each multiple of the step
        marks = np.arange(math.ceil(rpm.min() / step) * step, rpm.max() + 1e-9, step)
        li = [_nearest(rpm, m) for m in marks]
        fig.add_trace(go.Scatterpolar(
            r=amp[li], theta=lag[li], mode="markers+text", text=[f"{m:.0f}" for m in marks],
            textposition="top right", textfont={"size": 10, "color": colors[key]},
            marker={"size": 5, "color": colors[key]}, name=f"{name} speed labels (rpm)",
            showlegend=False, hoverinfo="skip", meta="labels"))
    shown = []
    for c in criticals:
        tr = next((t for t in traces if t["probe"] == c.get("probe") and
                   t.get("direction") == c.get("direction") and t["order"] == 1), None)
        if tr is None or not c.get("speed_rpm") or len(tr["speed_rpm"]) == 0:
            continue
        i = _nearest(tr["speed_rpm"], c["speed_rpm"])
        shown.append((c, float(to_display(float(tr["amplitude"][i]), kind, system)),
                      float(tr["phase_lag_deg"][i])))
    if shown:
        fig.add_trace(go.Scatterpolar(
            r=[s[1] for s in shown], theta=[s[2] for s in shown], mode="markers+text",
            name="critical speeds", meta="critical", text=[_critical_label(s[0]) for s in shown],
            textposition="bottom center", textfont={"size": 11},
            customdata=[s[0]["speed_rpm"] for s in shown],
            hovertext=[_critical_hover(s[0]) for s in shown], hoverinfo="text",
            marker={"size": 12, "color": INK, "line": {"color": "white", "width": 1},
                    "symbol": [DIRECTION_STYLE.get(s[0].get("direction"),
                                                   DIRECTION_STYLE["mixed"])["symbol"]
                               for s in shown]}))
    r, th = [], []
    if cursor_rpm is not None and traces and len(traces[0]["speed_rpm"]):
        tr = traces[0]
        i = _nearest(tr["speed_rpm"], cursor_rpm)
        r = [float(to_display(float(tr["amplitude"][i]), kind, system))]
        th = [float(tr["phase_lag_deg"][i])]
    fig.add_trace(go.Scatterpolar(r=r, theta=th, mode="markers", name="cursor", meta="cursor",
                                  showlegend=False, hoverinfo="skip",
                                  marker={"symbol": "circle-open", "size": 14,
                                          "color": CURSOR_COLOR, "line": {"width": 2}}))
    _layout(fig, title=title or "Polar plot", uirevision=uirevision, height=560)
    fig.update_layout(polar={
        "angularaxis": {"rotation": 90, "direction": "clockwise" if rotation == "ccw"
                        else "counterclockwise", "dtick": 30, "gridcolor": GRID,
                        "ticksuffix": "°"},
        "radialaxis": {"gridcolor": GRID, "angle": 90, "tickangle": 90,
                       "ticksuffix": " " + amplitude_label(kind, system).split(" ")[0]}},
        annotations=[{"text": f"radius {amplitude_label(kind, system)}; angle: phase lag "
                      f"(deg), rising against {rotation} rotation; labels: rpm", "xref": "paper", "yref": "paper", "x": 0,
                      "y": -0.08, "showarrow": False, "font": {"size": 10}}])
    return fig


# ----------------------------------------------------------------------------- speed
def speed_time(time_s, speed_rpm, *, criticals: Sequence[Mapping[str, Any]] = (),
               operating: Mapping[str, float] | None = None, title: str | None = None,
               uirevision: Any = None, max_points: int = 4000) -> go.Figure:
    """Speed versus time with each critical band shaded and the time spent inside it.

    A critical's band is its half-power band ``n1_rpm..n2_rpm`` when both are known, else
    its ``band_rpm``. Criticals of several probes that share a band are drawn once.
    The time inside a band is :func:`time_in_band` over the whole record.
    """
    t = np.asarray(time_s, dtype=float)
    n = np.asarray(speed_rpm, dtype=float)
    fig = go.Figure()
    idx = _decimate_index(t.size, max_points)
    fig.add_trace(go.Scatter(x=t[idx], y=n[idx], mode="lines", name="speed", meta="data",
                               line={"color": PALETTE[0], "width": 2},
                               hovertemplate="%{x:.1f} s<br>%{y:.0f} rpm<extra></extra>"))
    if operating and operating.get("min_operating_speed_rpm") is not None:
        fig.add_hrect(y0=operating["min_operating_speed_rpm"],
                      y1=operating["max_continuous_speed_rpm"], fillcolor=OPERATING_FILL,
                      line_width=0, layer="below", annotation_text="operating range",
                      annotation_position="top left", annotation_font_size=10)
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
        fig.add_hrect(y0=b["lo"], y1=b["hi"], fillcolor=HALF_POWER_FILL, line_width=0,
                      layer="below")
    if bands:
        lines = [f"{b['lo']:.0f}–{b['hi']:.0f} rpm (critical {_fmt(b['c'].get('speed_rpm'))} rpm):"
                 f" {b['seconds']:.1f} s" for b in bands]
        fig.add_annotation(text="<b>time inside critical bands</b><br>" + "<br>".join(lines),
                           xref="paper", yref="paper", x=0.99, y=0.03, xanchor="right",
                           yanchor="bottom", align="left", showarrow=False,
                           bgcolor="rgba(255,255,255,0.85)", bordercolor=GRID,
                           font={"size": 10})
    fig.add_trace(go.Scatter(x=[None], y=[None], mode="markers", name="time in band",
                             meta="bands", visible="legendonly", showlegend=False,
                             customdata=[[b["lo"], b["hi"], b["seconds"]] for b in bands]))
    _layout(fig, title=title or "Speed versus time", uirevision=uirevision, height=360)
    fig.update_xaxes(title_text="time from record start (s)")
    fig.update_yaxes(title_text="speed (rpm)", rangemode="tozero")
    return fig


# ----------------------------------------------------------------------------- direct
def direct_vs_filtered(traces: Sequence[Mapping[str, Any]], *, kind: str = "proximity",
                       system: UnitSystem = "metric",
                       limit_lines: Sequence[Mapping[str, Any]] = (),
                       operating: Mapping[str, float] | None = None, title: str | None = None,
                       uirevision: Any = None, max_points: int = MAX_POINTS) -> go.Figure:
    """Direct (unfiltered) level and 1X amplitude versus speed on one axis, with limits.

    ``traces`` as in :func:`bode` plus ``direct`` (storage units: um p-p or mm/s rms).
    For proximity probes both are p-p; for velocity the 1X is peak and the direct rms
    (the axis title says so). ``limit_lines`` with ``value`` are drawn as horizontal
    lines, those with ``speed_rpm``/``values`` as curves (reference zones).
    """
    fig = go.Figure()
    for k, tr in enumerate(traces):
        color = tr.get("color") or PALETTE[k % len(PALETTE)]
        rpm = np.asarray(tr["speed_rpm"], float)
        if rpm.size == 0:
            continue
        style = DIRECTION_STYLE.get(tr.get("direction", "mixed"), DIRECTION_STYLE["mixed"])
        d = np.asarray(to_display(np.asarray(tr["direct"], float), kind, system))
        a = np.asarray(to_display(np.asarray(tr["amplitude"], float), kind, system))
        idx = _decimate_index(rpm.size, max_points, keep=[int(np.nanargmax(d))])
        base = f"{tr['probe']} {tr.get('direction', '')}".strip()
        fig.add_trace(go.Scatter(x=rpm[idx], y=d[idx], mode="lines", name=f"{base} direct",
                                   meta="data", line={"color": color, "dash": style["dash"],
                                                      "width": 2.2}))
        fig.add_trace(go.Scatter(x=rpm[idx], y=a[idx], mode="lines", name=f"{base} 1X",
                                   meta="data", opacity=0.75,
                                   line={"color": color, "dash": style["dash"], "width": 1}))
    _operating_shapes(fig, operating)
    _add_limit_lines(fig, limit_lines, kind, system)
    tops = [float(np.nanmax(to_display(np.asarray(t["direct"], float), kind, system)))
            for t in traces if len(t["direct"])]
    tops += [float(to_display(float(ln["value"]), kind, system)) for ln in limit_lines
             if ln.get("value") is not None]
    if tops:  # reference zones far above the levels are clipped (zoom out to see them)
        fig.update_yaxes(range=[0, 1.25 * max(tops)])
    u = display_unit(kind, system).replace("um", "µm")
    ytitle = (f"amplitude ({u} pp)" if kind == "proximity"
              else f"amplitude ({u}; direct rms, 1X pk)")
    _layout(fig, title=title or "Direct (unfiltered) level beside 1X", uirevision=uirevision,
            height=480)
    fig.update_layout(legend={"orientation": "h", "yanchor": "top", "y": -0.18, "x": 0,
                              "xanchor": "left"}, margin={"b": 120})
    fig.update_xaxes(title_text="speed (rpm)")
    fig.update_yaxes(title_text=ytitle)
    return fig


def _add_limit_lines(fig, limit_lines, kind, system) -> None:
    for j, ln in enumerate(limit_lines):
        color = "#D55E00" if ln.get("verdict_line", True) else "#777777"
        if ln.get("value") is not None:
            x0, x1 = ln.get("applies_rpm") or (None, None)
            y = float(to_display(float(ln["value"]), kind, system))
            if x0 is None:
                fig.add_hline(y=y, line={"color": color, "dash": "longdash", "width": 1.5},
                              annotation_text=ln.get("label", "limit"),
                              annotation_position="top left", annotation_font_size=10)
            else:
                fig.add_trace(go.Scatter(x=[x0, x1], y=[y, y], mode="lines+text",
                                         name=ln.get("label", "limit"), meta="limit",
                                         line={"color": color, "dash": "longdash", "width": 2},
                                         text=[ln.get("label", "limit"), ""],
                                         textposition="top right", textfont={"size": 10},
                                         hovertext=ln.get("source", ""), hoverinfo="text"))
        elif ln.get("speed_rpm") is not None:
            y = np.asarray(to_display(np.asarray(ln["values"], float), kind, system))
            fig.add_trace(go.Scatter(x=list(ln["speed_rpm"]), y=list(y), mode="lines",
                                     name=ln.get("label", "zone"), meta="limit",
                                     line={"color": "#999999", "dash": "dot", "width": 1},
                                     hovertext=ln.get("source", ""), hoverinfo="text+name"))


def guidance_lines(profile, *, kind: str, max_continuous_speed_rpm: float,
                   speed_range_rpm: tuple[float, float], include_reference_zones: bool = True
                   ) -> list[dict[str, Any]]:
    """Limit lines of a guidance profile (and reference zones) for one transducer kind.

    Parameters
    ----------
    profile : str or Profile
        A shipped profile name, a path, or a loaded :class:`~rundash.analysis.profiles.
        Profile`.
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
    from rundash.analysis.profiles import load_profile, reference_zones

    prof = load_profile(profile)
    out: list[dict[str, Any]] = []
    for lim in prof.limits:
        if lim.transducer != kind:
            continue
        value = lim.value(max_continuous_speed_rpm)
        unit = "µm pp" if kind == "proximity" else "mm/s rms"
        line: dict[str, Any] = {
            "label": f"{lim.title}: {value:.1f} {unit}", "id": lim.id,
            "measure": "1X" if lim.quantity.lower() == "1x" else "direct", "value": value,
            "source": lim.source.cite(), "verdict_line": True}
        if lim.applies == "top-speed":
            line["applies_rpm"] = (0.9 * max_continuous_speed_rpm,
                                   max(speed_range_rpm[1], max_continuous_speed_rpm))
        out.append(line)
    if include_reference_zones and kind == "proximity":
        lo = max(speed_range_rpm[0], 1.0)
        n = np.linspace(max(lo, 0.25 * speed_range_rpm[1]), speed_range_rpm[1], 60)
        z = reference_zones()["shaft_displacement"]
        cite = f"{z['document']}, {z['edition']}, {z['clause']} ({z['confidence']})"
        for name, curve in zip(("A/B", "B/C", "C/D"), shaft_zone_boundaries_um_pp(n)):
            out.append({"label": f"ISO zone {name} (reference, steady operation)",
                        "measure": "direct", "speed_rpm": n.tolist(), "values": curve.tolist(),
                        "source": cite, "verdict_line": False})
    return out


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
    fig = go.Figure(go.Heatmap(
        x=f, y=rpm, z=zlog, customdata=a, colorscale="Cividis", meta="data",
        zmin=math.log10(floor), zmax=math.log10(peak),
        colorbar={"title": {"text": unit + " (log)", "side": "right"}, "thickness": 14,
                  "tickvals": decades.tolist(), "ticktext": [f"{10.0 ** d:g}" for d in decades]},
        hovertemplate="%{x:.1f} Hz<br>%{y:.0f} rpm<br>%{customdata:.3g} " + unit
        + "<extra></extra>"))
    top = float(rpm.max()) if rpm.size else 1.0
    fmax = float(f.max()) if f.size else 1.0
    for o in orders:
        n_end = min(top, 60.0 * fmax / o)
        fig.add_trace(go.Scatter(x=[0, o * n_end / 60.0], y=[0, n_end], mode="lines+text",
                                 name=f"{_order_name(o)} line", meta="order",
                                 text=["", _order_name(o)], textposition="middle right",
                                 line={"color": "white", "width": 1, "dash": "dot"},
                                 textfont={"color": INK, "size": 11}, showlegend=False,
                                 hoverinfo="skip"))
    _layout(fig, title=title or f"Cascade {probe}".strip(), uirevision=uirevision, height=460)
    shown_f = min(fmax, 1.5 * max(orders or [1]) * top / 60.0)
    fig.update_xaxes(title_text="frequency (Hz)", range=[0, shown_f], showgrid=False)
    fig.update_yaxes(title_text="speed (rpm)", range=[float(rpm.min()) if rpm.size else 0, top],
                     showgrid=False)
    return fig


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
    fig = go.Figure()
    for k, o in enumerate(orders):
        fig.add_trace(go.Scatter(x=[0, top], y=[0, o * top / 60.0], mode="lines+text",
                                 name=f"{_order_name(o)}", meta="order",
                                 text=["", _order_name(o)], textposition="top left",
                                 line={"color": PALETTE[k % len(PALETTE)], "width": 1.5}))
    fmax = max(orders) * top / 60.0 if orders else top / 60.0
    _operating_shapes(fig, operating)
    crit = [c for c in criticals if c.get("speed_rpm")]
    if crit:
        fig.add_trace(go.Scatter(
            x=[c["speed_rpm"] for c in crit], y=[c["speed_rpm"] / 60.0 for c in crit],
            mode="markers", name="critical speeds (measured, 1X)", meta="critical",
            marker={"size": 11, "color": INK, "symbol": [
                DIRECTION_STYLE.get(c.get("direction"), DIRECTION_STYLE["mixed"])["symbol"]
                for c in crit]},
            hovertext=[_critical_hover(c) for c in crit], hoverinfo="text"))
    xs, ys, tx = [], [], []
    for fn in natural_frequencies_hz:
        fig.add_hline(y=fn, line={"color": "#CC79A7", "dash": "dash", "width": 1.5},
                      annotation_text=f"natural frequency {fn:g} Hz",
                      annotation_position="top right", annotation_font_size=10)
        for o in orders:
            n = 60.0 * fn / o
            if n <= top:
                xs.append(n)
                ys.append(fn)
                tx.append(f"{_order_name(o)} meets {fn:g} Hz at {n:.0f} rpm")
    if xs:
        fig.add_trace(go.Scatter(x=xs, y=ys, mode="markers", name="interference points",
                                 meta="interference", hovertext=tx, hoverinfo="text",
                                 marker={"size": 9, "color": "#CC79A7", "symbol": "x"}))
    _layout(fig, title=title or "Campbell (interference) diagram", uirevision=uirevision,
            height=460)
    fig.update_xaxes(title_text="speed (rpm)", range=[0, top])
    fig.update_yaxes(title_text="frequency (Hz)",
                     range=[0, max(fmax, *(list(natural_frequencies_hz) or [0])) * 1.05])
    return fig


# ----------------------------------------------------------------------------- orbit
def _screen_angle_rad(angle_deg: float, rotation: str) -> float:
    # the reference sensor sits at the top of the screen (our choice, stated in the
    # figure); probe angles are measured from it in the direction of rotation, and the
    # screen shows the machine viewed from the driver end.
    sign = 1.0 if rotation == "ccw" else -1.0
    return math.radians(90.0 + sign * angle_deg)


def orbit(x_probe: Mapping[str, Any], y_probe: Mapping[str, Any], *, kind: str = "proximity",
          system: UnitSystem = "metric", rotation: str = "ccw", speed_rpm: float | None = None,
          raw_x=None, raw_y=None, title: str | None = None, n_points: int = 256
          ) -> go.Figure:
    """Orbit of an X/Y probe pair: filtered 1X ellipse and one unfiltered revolution.

    The probe mounting angles **are applied** here: each probe reads the shaft's motion
    along its own axis, ``d_i = u cos(b_i) + v sin(b_i)`` with ``b_i`` the probe's screen
    angle (reference sensor at the top, angles in the direction of rotation, machine
    viewed from the driver end), and the two readings are solved for the screen
    coordinates ``(u, v)``. This works for any two non-parallel probes.

    Parameters
    ----------
    x_probe, y_probe : dict
        ``name``, ``angle_deg`` (mounting angle), ``amplitude`` (1X, storage units:
        p-p for proximity) and ``phase_lag_deg`` of the 1X vector at the chosen speed.
    raw_x, raw_y : array_like, optional
        One revolution of each unfiltered waveform (storage units, same length), starting
        at the once-per-rev event; its mean is removed.
    speed_rpm : float, optional
        Only labels the title.

    Returns
    -------
    plotly.graph_objects.Figure
        Traces ``'1X filtered'`` and ``'unfiltered'`` (when given), the once-per-rev mark,
        and the whirl direction in the title (forward: same sense as rotation).
    """
    bx = _screen_angle_rad(float(x_probe["angle_deg"]), rotation)
    by = _screen_angle_rad(float(y_probe["angle_deg"]), rotation)
    m = np.array([[math.cos(bx), math.sin(bx)], [math.cos(by), math.sin(by)]])
    if abs(np.linalg.det(m)) < 1e-6:
        raise ValueError("the two probes are parallel: no orbit can be built")
    minv = np.linalg.inv(m)
    half = 0.5 if kind == "proximity" else 1.0  # p-p -> peak for the 1X sinusoid
    th = np.linspace(0.0, 1.0, n_points + 1)

    def filt(p):
        a = half * float(p["amplitude"])
        return a * np.cos(2 * np.pi * th - math.radians(float(p["phase_lag_deg"])))

    def to_screen(dx, dy):
        uv = minv @ np.vstack([dx, dy])
        return np.asarray(to_display(uv[0], kind, system)), np.asarray(to_display(uv[1], kind, system))

    u, v = to_screen(filt(x_probe), filt(y_probe))
    fig = go.Figure()
    fig.add_trace(go.Scatter(x=u, y=v, mode="lines", name="1X filtered", meta="data",
                             line={"color": PALETTE[0], "width": 2.5}))
    fig.add_trace(go.Scatter(x=[u[0]], y=[v[0]], mode="markers", name="once-per-rev mark",
                             meta="mark", marker={"size": 10, "color": PALETTE[0],
                                                  "symbol": "circle", "line": {"color": "white",
                                                                               "width": 1}}))
    whirl = whirl_direction(u, v)
    if raw_x is not None and raw_y is not None and len(raw_x) > 3:
        rx = np.asarray(raw_x, dtype=float)
        ry = np.asarray(raw_y, dtype=float)
        n = min(rx.size, ry.size)
        ru, rv = to_screen(rx[:n] - rx[:n].mean(), ry[:n] - ry[:n].mean())
        fig.add_trace(go.Scatter(x=ru, y=rv, mode="lines", name="unfiltered (one revolution)",
                                 meta="raw", line={"color": PALETTE[1], "width": 1.2}))
        fig.add_trace(go.Scatter(x=[ru[0]], y=[rv[0]], mode="markers", meta="mark",
                                 name="once-per-rev mark (unfiltered)", showlegend=False,
                                 marker={"size": 9, "color": PALETTE[1]}))
    sense = "forward" if whirl == rotation else "reverse"
    unit = display_unit(kind, system).replace("um", "µm")
    sp = f" at {speed_rpm:.0f} rpm" if speed_rpm is not None else ""
    _layout(fig, title=title or f"Orbit{sp}: {sense} whirl ({whirl})", height=480)
    lim = float(np.nanmax(np.abs(np.concatenate([u, v] + ([ru, rv] if len(fig.data) > 2
                                                          else []))))) * 1.15 or 1.0
    fig.update_xaxes(title_text=f"horizontal ({unit})", range=[-lim, lim], zeroline=True,
                     zerolinecolor="#bbbbbb")
    fig.update_yaxes(title_text=f"vertical ({unit})", range=[-lim, lim], zeroline=True,
                     zerolinecolor="#bbbbbb", scaleanchor="x", scaleratio=1)
    fig.add_annotation(text="probe mounting angles applied; reference sensor at top; "
                       "viewed from the driver end", xref="paper", yref="paper", x=0, y=-0.2,
                       showarrow=False, font={"size": 10})
    fig.update_layout(margin={"b": 80})
    fig.update_layout(meta={"whirl": whirl, "sense": sense})
    return fig
