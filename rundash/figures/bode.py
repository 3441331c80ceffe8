"""The vector family: Bode plot (amplitude and phase lag against speed) and polar plot
(the nX vector in the complex plane)."""

from __future__ import annotations

import math
from typing import Any, Mapping, Sequence

import numpy as np
import plotly.graph_objects as go

from rundash.figures.common import (
    CURSOR_COLOR, HALF_POWER_FILL, INK, MARGIN_FILL, MAX_POINTS, PALETTE, PHASE_FLOOR_NOTE,
    UNWRAPPED_NOTE, PhaseDisplay, UnitSystem, add_hline, add_operating_shapes, add_vline,
    add_vrect, base_layout, break_at_wraps, critical_hover, critical_label,
    critical_speeds_of, direction_style, display_pieces, limit_label, make_figure, margin_zones,
    nearest_index, order_name, polar_layout, trace_groups, typed_array,
)
from rundash.units import amplitude_label, to_display


# ----------------------------------------------------------------------------- bode
def bode(traces: Sequence[Mapping[str, Any]], *, kind: str = "proximity",
         system: UnitSystem = "metric", criticals: Sequence[Mapping[str, Any]] = (),
         operating: Mapping[str, float] | None = None,
         limit_lines: Sequence[Mapping[str, Any]] = (), cursor_rpm: float | None = None,
         compensated: bool = True, phase: PhaseDisplay = "unwrapped",
         title: str | None = None, uirevision: Any = None,
         max_points: int = MAX_POINTS, model: Sequence[Mapping[str, Any]] = ()) -> go.Figure:
    """Bode plot: nX amplitude (top) and phase lag (bottom) versus speed.

    Parameters
    ----------
    traces : sequence of dict
        Each with ``speed_rpm``, ``amplitude`` (storage units), ``phase_lag_deg`` (arrays
        of one shape, in time order), ``probe``, ``order`` and ``direction``
        (``'run-up'``, ``'coast-down'``, ``'steady'`` or ``'mixed'``); optional ``color``.
        Pieces of one probe, order and direction are drawn as one trace (gaps between).
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
    phase : {'unwrapped', 'wrapped'}
        ``'unwrapped'``: lag made continuous along each trace (:func:`unwrap_phase_deg`),
        starting in [0, 360) at its lowest speed; ``'wrapped'``: the stored 0..360 values.
        Display only.
    max_points : int
        About the most points drawn per trace (:func:`decimate_minmax`; peaks exact).
    model : sequence of dict
        The run's fitted modal model as steady 1X curves (findings ``modal_model.curves``:
        ``probe``, ``speed_rpm``, ``amplitude``, ``phase_lag_deg``), drawn over the 1X data
        of their probe (``meta='model'``), the phase unwrapped to lie on the data.

    Returns
    -------
    plotly.graph_objects.Figure
        Data traces carry ``meta='data'`` and speeds in ``customdata``; the critical
        markers are the trace named ``'critical speeds'``; the last two traces are the
        cursor (``meta='cursor'``).
    """
    data: list[dict] = []
    colors: dict[tuple, str] = {}
    shown_probes: list[str] = []
    unit = amplitude_label(kind, system)
    first: dict[str, np.ndarray] | None = None
    phase_of: dict[str, tuple] = {}
    for (probe, order, direction), group in trace_groups(traces, ("probe", "order", "direction")):
        key = (probe, order)
        if key not in colors:
            colors[key] = group[0].get("color") or PALETTE[len(colors) % len(PALETTE)]
        if probe not in shown_probes:
            shown_probes.append(probe)
        arr = display_pieces(group, kind, system, phase=phase, max_points=max_points,
                              keep_speeds=critical_speeds_of(criticals, probe, direction)
                              if order == 1 else (), blank_phase=True)
        first = first or arr
        if order == 1:
            phase_of.setdefault(probe, (arr["rpm"], arr["phase"]))
        name = f"{probe} {order_name(order)} {direction or ''}".strip()
        line = {"color": colors[key], "dash": direction_style(direction)["dash"],
                "width": 2.0 if order == 1 else 1.4}
        x = typed_array(arr["rpm"])
        common = {"type": "scatter", "mode": "lines", "line": line, "name": name,
                  "legendgroup": name, "meta": "data", "customdata": x, "x": x}
        data.append(dict(common, y=typed_array(arr["amplitude"]), xaxis="x", yaxis="y",
                         showlegend=True, hovertemplate="%{x:.0f} rpm<br>%{y:.3g} " + unit
                         + f"<extra>{name}</extra>"))
        px, py = break_at_wraps(arr["rpm"], arr["phase"]) if phase == "wrapped" \
            else (arr["rpm"], arr["phase"])
        data.append(dict(common, x=typed_array(px), customdata=typed_array(px),
                         y=typed_array(py), xaxis="x2", yaxis="y2",
                         showlegend=False, hovertemplate="%{x:.0f} rpm<br>%{y:.0f}° lag"
                         + (" (unwrapped)" if phase == "unwrapped" else "")
                         + f"<extra>{name}</extra>"))

    data += _model_traces(model, shown_probes, phase_of, kind, system, phase)

    comp = "slow-roll compensated" if compensated else "uncompensated"
    layout = base_layout(title or f"Bode plot ({comp})", uirevision, 580)
    axis = layout.pop("xaxis")
    layout.pop("yaxis")
    layout.update(
        xaxis=dict(axis, anchor="y", domain=[0.0, 1.0], matches="x2", showticklabels=False),
        xaxis2=dict(axis, anchor="y2", domain=[0.0, 1.0], title={"text": "speed (rpm)"}),
        yaxis=dict(axis, anchor="x", domain=[0.4548, 1.0], rangemode="tozero",
                   title={"text": f"amplitude ({unit})"}),
        yaxis2=dict(axis, anchor="x2", domain=[0.0, 0.3948], title={"text": "phase lag (deg)"}),
        hovermode="x",  # a hover anywhere at a speed reads every trace there
        legend={"orientation": "h", "yanchor": "top", "y": -0.11, "xanchor": "left", "x": 0,
                "font": {"size": 11}},
        margin={"l": 64, "r": 24, "t": 56, "b": 96})
    if phase == "wrapped":
        layout["yaxis2"].update(range=[0, 360], tickvals=[0, 90, 180, 270, 360])
        note = "lag 0–360°; " + PHASE_FLOOR_NOTE
    else:
        layout["yaxis2"].update(dtick=90)
        note = UNWRAPPED_NOTE + "; " + PHASE_FLOOR_NOTE
    layout["annotations"].append({
        "text": note, "xref": "x2 domain", "yref": "y2 domain", "x": 0.0, "y": 1.0,
        "xanchor": "left", "yanchor": "bottom", "showarrow": False,
        "font": {"size": 10, "color": "#666666"}, "name": "phase-note"})

    add_operating_shapes(layout, operating, row=1)
    add_operating_shapes(layout, operating, row=2, label=False)
    for z in margin_zones(criticals, operating):
        for row in (1, 2):
            add_vrect(layout, z["lo_rpm"], z["hi_rpm"], MARGIN_FILL, row=row,
                   text=f"required margin {z['pct']:.1f} %" if row == 1 else None,
                   position="bottom left" if z["side"] == "below" else "bottom right")
    shown = [c for c in criticals if c.get("probe") in shown_probes and c.get("speed_rpm")]
    for c in shown:
        if c.get("n1_rpm") and c.get("n2_rpm"):
            add_vrect(layout, c["n1_rpm"], c["n2_rpm"], HALF_POWER_FILL, row=1)
        for row in (1, 2):
            add_vline(layout, c["speed_rpm"], {"color": INK, "dash": "dot", "width": 1}, row=row)
    if shown:
        amps = [to_display(float(c["peak_amplitude"]), kind, system)
                if c.get("peak_amplitude") is not None else None for c in shown]
        ymax = max([a for a in amps if a is not None] or [1.0])
        data.append({
            "type": "scatter", "xaxis": "x", "yaxis": "y",
            "x": [c["speed_rpm"] for c in shown],
            "y": [float(a) if a is not None else ymax for a in amps],
            "mode": "markers+text", "name": "critical speeds", "meta": "critical",
            "text": [critical_label(c) for c in shown],
            "textposition": _label_sides([float(c["speed_rpm"]) for c in shown]),
            "textfont": {"size": 11}, "cliponaxis": False,
            "marker": {"symbol": [direction_style(c.get("direction"))["symbol"] for c in shown],
                       "size": 11, "color": INK, "line": {"color": "white", "width": 1}},
            "customdata": [[i, c["speed_rpm"]] for i, c in enumerate(shown)],
            "hovertext": [critical_hover(c) for c in shown], "hoverinfo": "text"})
    for ln in limit_lines:
        if ln.get("measure") == "1X" and ln.get("value") is not None:
            add_hline(layout, float(to_display(float(ln["value"]), kind, system)),
                   {"color": "#D55E00", "dash": "longdash", "width": 1.5}, row=1,
                   text=limit_label(ln, kind, system))
    xs, ya, yp = [], [], []
    if cursor_rpm is not None and first is not None:
        i = nearest_index(first["rpm"], cursor_rpm)
        xs, ya, yp = [float(first["rpm"][i])], [float(first["amplitude"][i])], \
            [float(first["phase"][i])]
    mk = {"symbol": "circle-open", "size": 14, "color": CURSOR_COLOR, "line": {"width": 2}}
    for y, ax in ((ya, "y"), (yp, "y2")):
        data.append({"type": "scatter", "x": xs, "y": y, "xaxis": ax.replace("y", "x"),
                     "yaxis": ax, "mode": "markers", "marker": mk, "name": "cursor",
                     "meta": "cursor", "showlegend": False, "hoverinfo": "skip"})
    return make_figure(data, layout)


MODEL_LINE = {"color": INK, "dash": "dot", "width": 1.6}


def _model_traces(model, probes, phase_of, kind, system, phase) -> list[dict]:
    """Bode traces of the fitted model's steady response of the probes shown; an
    unwrapped phase is moved by whole turns onto the probe's first 1X data trace."""
    out = []
    unit = amplitude_label(kind, system)
    for cur in model:
        probe = cur.get("probe")
        if probe not in probes or not cur.get("speed_rpm"):
            continue
        rpm = np.asarray(cur["speed_rpm"], float)
        amp = np.asarray(to_display(np.asarray(cur["amplitude"], float), kind, system))
        lag = np.asarray(cur["phase_lag_deg"], float)
        if phase == "unwrapped":
            lag = np.degrees(np.unwrap(np.radians(lag)))
            ref = phase_of.get(probe)
            if ref is not None:
                x, y = np.asarray(ref[0], float), np.asarray(ref[1], float)
                ok = np.isfinite(x) & np.isfinite(y)
                if ok.any():
                    i = int(np.argmin(np.abs(x[ok] - rpm[0])))
                    lag += 360.0 * np.round((y[ok][i] - lag[0]) / 360.0)
        name = f"{probe} fitted model (steady state)"
        common = {"type": "scatter", "mode": "lines", "line": MODEL_LINE, "name": name,
                  "legendgroup": name, "meta": "model", "x": typed_array(rpm)}
        out.append(dict(common, y=typed_array(amp), xaxis="x", yaxis="y", showlegend=True,
                        hovertemplate="%{x:.0f} rpm<br>%{y:.3g} " + unit
                        + f"<extra>{name}</extra>"))
        out.append(dict(common, y=typed_array(lag), xaxis="x2", yaxis="y2", showlegend=False,
                        hovertemplate="%{x:.0f} rpm<br>%{y:.0f}° lag" + f"<extra>{name}</extra>"))
    return out


def _label_sides(speeds_rpm: Sequence[float], close_pct: float = 5.0) -> list[str]:
    """Text positions of the critical labels: centred above each marker, but a label
    within ``close_pct`` % in speed of its neighbour goes to the left of the lower one and
    the right of the higher one, so two close criticals (X and Y of one bearing) do not
    print on top of each other."""
    pos = ["top center"] * len(speeds_rpm)
    order = sorted(range(len(speeds_rpm)), key=lambda i: speeds_rpm[i])
    for a, b in zip(order, order[1:]):
        if abs(speeds_rpm[b] - speeds_rpm[a]) <= close_pct / 100.0 * max(speeds_rpm[a], 1.0):
            pos[a] = "top left" if pos[a] == "top center" else pos[a]
            pos[b] = "top right"
    return pos


# ----------------------------------------------------------------------------- polar
def _nice_step(span: float, n: int = 8) -> float:
    raw = max(span / n, 1e-9)
    mag = 10 ** math.floor(math.log10(raw))
    for m in (1, 2, 2.5, 5, 10):
        if raw <= m * mag:
            return m * mag
    return 10 * mag


def _spread_labels(marks, li, r, theta_deg, min_gap: float = 0.08, taken=None,
                   r_max: float | None = None):
    """Speed labels that would sit on top of an earlier one (closer than ``min_gap`` of
    the largest radius, e.g. piled at the centre at slow roll) are left out; ``taken``
    (a list, extended here) holds the labels of the curves drawn before, so that the
    labels of several runs on one polar plot do not pile up either."""
    if r_max is None:
        r_max = float(np.nanmax(r)) if len(r) else 0.0
    pts = taken if taken is not None else []
    kept_m, kept_i = [], []
    for m, i in zip(marks, li):
        z = r[i] * np.exp(1j * np.radians(theta_deg[i]))
        if all(abs(z - p) >= min_gap * r_max for p in pts):
            kept_m.append(m)
            kept_i.append(i)
            pts.append(z)
    return kept_m, kept_i


def polar(traces: Sequence[Mapping[str, Any]], *, kind: str = "proximity",
          system: UnitSystem = "metric", rotation: str = "ccw",
          criticals: Sequence[Mapping[str, Any]] = (), cursor_rpm: float | None = None,
          label_step_rpm: float | None = None, title: str | None = None,
          uirevision: Any = None, max_points: int = MAX_POINTS,
          model: Sequence[Mapping[str, Any]] = ()) -> go.Figure:
    """Polar plot of the nX vector: amplitude as radius, phase lag as angle.

    0 deg lag is at the top; lag increases against the direction of rotation (clockwise
    on screen for a ``'ccw'`` machine; common practice, no source). Speed labels are
    placed along each curve every ``label_step_rpm`` (a round step giving about eight
    labels when None); criticals are marked on the curve of their probe and direction.

    Parameters are those of :func:`bode` (the same ``traces`` dicts; ``model`` the
    fitted model's steady curves, drawn over the data of their probe, ``meta='model'``).
    """
    data: list[dict] = []
    colors: dict[tuple, str] = {}
    groups = trace_groups(traces, ("probe", "order", "direction"))
    all_rpm = np.concatenate([np.asarray(t["speed_rpm"], float) for _, g in groups for t in g]) \
        if groups else np.array([0.0, 1.0])
    step = label_step_rpm or _nice_step(float(np.ptp(all_rpm)) if all_rpm.size else 1.0)
    unit = amplitude_label(kind, system)
    drawn: dict[tuple, dict[str, np.ndarray]] = {}
    taken: list[complex] = []  # speed labels placed so far, over every curve
    amps = [to_display(np.asarray(t["amplitude"], float), kind, system)
            for _, g in groups for t in g]
    r_all = max((float(np.nanmax(a)) for a in amps if np.size(a) and np.isfinite(a).any()),
                default=0.0)
    for (probe, order, direction), group in groups:
        key = (probe, order)
        colors.setdefault(key, group[0].get("color") or PALETTE[len(colors) % len(PALETTE)])
        arr = display_pieces(group, kind, system, phase="wrapped", max_points=max_points,
                              keep_speeds=critical_speeds_of(criticals, probe, direction))
        drawn[(probe, order, direction)] = arr
        name = f"{probe} {order_name(order)} {direction or ''}".strip()
        data.append({
            "type": "scatterpolar", "r": typed_array(arr["amplitude"]), "theta": typed_array(arr["phase"]),
            "mode": "lines", "name": name, "meta": "data", "customdata": typed_array(arr["rpm"]),
            "line": {"color": colors[key], "dash": direction_style(direction)["dash"], "width": 2},
            "hovertemplate": "%{customdata:.0f} rpm<br>%{r:.3g} " + unit
            + " ∠ %{theta:.0f}°<extra>" + name + "</extra>"})
        # speed labels where the curve passes each multiple of the step
        rpm = arr["rpm"]
        marks = np.arange(math.ceil(np.nanmin(rpm) / step) * step, np.nanmax(rpm) + 1e-9, step)
        li = [nearest_index(rpm, m) for m in marks]
        marks, li = _spread_labels(marks, li, arr["amplitude"], arr["phase"], taken=taken,
                                   r_max=r_all)
        data.append({
            "type": "scatterpolar", "r": arr["amplitude"][li].tolist(),
            "theta": arr["phase"][li].tolist(), "mode": "markers+text",
            "text": [f"{m:.0f}" for m in marks], "textposition": "top right",
            "textfont": {"size": 10, "color": colors[key]},
            "marker": {"size": 5, "color": colors[key]}, "name": f"{name} speed labels (rpm)",
            "showlegend": False, "hoverinfo": "skip", "meta": "labels"})
    probes = {p for p, _, _ in drawn}
    for cur in model:
        if cur.get("probe") in probes and cur.get("speed_rpm"):
            name = f"{cur['probe']} fitted model (steady state)"
            data.append({
                "type": "scatterpolar", "mode": "lines", "name": name, "meta": "model",
                "r": typed_array(np.asarray(to_display(np.asarray(cur["amplitude"], float),
                                                       kind, system))),
                "theta": typed_array(np.asarray(cur["phase_lag_deg"], float) % 360.0),
                "customdata": typed_array(np.asarray(cur["speed_rpm"], float)),
                "line": MODEL_LINE, "hovertemplate": "%{customdata:.0f} rpm<br>%{r:.3g} " + unit
                + " ∠ %{theta:.0f}°<extra>" + name + "</extra>"})
    shown = []
    for c in criticals:
        arr = next((a for (p, o, d), a in drawn.items() if p == c.get("probe")
                    and d == c.get("direction") and o == 1), None)
        if arr is None or not c.get("speed_rpm"):
            continue
        i = nearest_index(arr["rpm"], c["speed_rpm"])
        shown.append((c, float(arr["amplitude"][i]), float(arr["phase"][i])))
    if shown:
        data.append({
            "type": "scatterpolar", "r": [s[1] for s in shown], "theta": [s[2] for s in shown],
            "mode": "markers+text", "name": "critical speeds", "meta": "critical",
            "text": [critical_label(s[0]) for s in shown], "textposition": "bottom center",
            "textfont": {"size": 11}, "customdata": [s[0]["speed_rpm"] for s in shown],
            "hovertext": [critical_hover(s[0]) for s in shown], "hoverinfo": "text",
            "marker": {"size": 12, "color": INK, "line": {"color": "white", "width": 1},
                       "symbol": [direction_style(s[0].get("direction"))["symbol"] for s in shown]}})
    r, th = [], []
    if cursor_rpm is not None and drawn:
        arr = next(iter(drawn.values()))
        i = nearest_index(arr["rpm"], cursor_rpm)
        r, th = [float(arr["amplitude"][i])], [float(arr["phase"][i])]
    data.append({"type": "scatterpolar", "r": r, "theta": th, "mode": "markers",
                 "name": "cursor", "meta": "cursor", "showlegend": False, "hoverinfo": "skip",
                 "marker": {"symbol": "circle-open", "size": 14, "color": CURSOR_COLOR,
                            "line": {"width": 2}}})
    layout = polar_layout(title or "Polar plot", uirevision, 580, rotation=rotation,
                          radial_suffix=" " + unit.split(" ")[0])
    layout["legend"] = {"orientation": "h", "yanchor": "top", "y": -0.06, "xanchor": "left",
                        "x": 0, "font": {"size": 11}}
    layout["margin"] = {"l": 40, "r": 40, "t": 56, "b": 96}
    layout["annotations"].append({
        "text": f"radius {unit}; angle: phase lag (deg), rising against {rotation} rotation; "
                "labels: rpm", "xref": "paper", "yref": "paper", "x": 0, "y": 0.0,
        "xanchor": "left", "yanchor": "top", "showarrow": False, "font": {"size": 10}})
    return make_figure(data, layout)
