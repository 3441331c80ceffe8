"""Orbits of an X/Y probe pair (filtered 1X and unfiltered) and their whirl direction."""

from __future__ import annotations

import math
from typing import Any, Literal, Mapping

import numpy as np
import plotly.graph_objects as go

from rundash.conventions import side_of_top
from rundash.figures.common import (
    INK, PALETTE, UnitSystem, add_vline, base_layout, make_figure, typed_array,
)
from rundash.units import amplitude_label, display_unit, to_display


def whirl_direction(u, v) -> Literal["ccw", "cw"]:
    """Sense in which a closed orbit is traversed on screen (signed shoelace area)."""
    u = np.asarray(u, dtype=float)
    v = np.asarray(v, dtype=float)
    area = 0.5 * np.sum(u * np.roll(v, -1) - np.roll(u, -1) * v)
    return "ccw" if area > 0 else "cw"




# ----------------------------------------------------------------------------- orbit
def _screen_angle_rad(angle_deg: float, rotation: str, tach_angle_deg: float = 0.0) -> float:
    # top dead centre at the top of the screen, the machine viewed from the driver end;
    # the once-per-rev sensor sits ``tach_angle_deg`` from the top in the direction of
    # rotation and the probe angles are measured from it in the same direction
    # (rundash.conventions).
    sign = 1.0 if rotation == "ccw" else -1.0
    return math.radians(90.0 + sign * (tach_angle_deg + angle_deg))


def orbit(x_probe: Mapping[str, Any], y_probe: Mapping[str, Any], *, kind: str = "proximity",
          system: UnitSystem = "metric", rotation: str = "ccw", speed_rpm: float | None = None,
          raw_x=None, raw_y=None, title: str | None = None, n_points: int = 256,
          tach_angle_deg: float = 0.0) -> go.Figure:
    """Orbit of an X/Y probe pair: filtered 1X ellipse and one unfiltered revolution.

    The probe mounting angles **are applied** here: each probe reads the shaft's motion
    along its own axis, ``d_i = u cos(b_i) + v sin(b_i)`` with ``b_i`` the probe's screen
    angle (top dead centre at the top, the once-per-rev sensor ``tach_angle_deg`` from it
    and the probe angles from the sensor, both in the direction of rotation, machine
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
    bx = _screen_angle_rad(float(x_probe["angle_deg"]), rotation, tach_angle_deg)
    by = _screen_angle_rad(float(y_probe["angle_deg"]), rotation, tach_angle_deg)
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
    data: list[dict[str, Any]] = [
        {"type": "scatter", "x": typed_array(u), "y": typed_array(v), "mode": "lines",
         "name": "1X filtered", "meta": "data", "line": {"color": PALETTE[0], "width": 2.5}},
        {"type": "scatter", "x": [float(u[0])], "y": [float(v[0])], "mode": "markers",
         "name": "once-per-rev mark", "meta": "mark",
         "marker": {"size": 10, "color": PALETTE[0], "symbol": "circle",
                    "line": {"color": "white", "width": 1}}}]
    whirl = whirl_direction(u, v)
    parts = [u, v]
    if raw_x is not None and raw_y is not None and len(raw_x) > 3:
        rx = np.asarray(raw_x, dtype=float)
        ry = np.asarray(raw_y, dtype=float)
        n = min(rx.size, ry.size)
        ru, rv = to_screen(rx[:n] - rx[:n].mean(), ry[:n] - ry[:n].mean())
        parts += [ru, rv]
        data.append({"type": "scatter", "x": typed_array(ru), "y": typed_array(rv),
                     "mode": "lines", "name": "unfiltered (one revolution)", "meta": "raw",
                     "line": {"color": PALETTE[1], "width": 1.2}})
        data.append({"type": "scatter", "x": [float(ru[0])], "y": [float(rv[0])],
                     "mode": "markers", "meta": "mark", "showlegend": False,
                     "name": "once-per-rev mark (unfiltered)",
                     "marker": {"size": 9, "color": PALETTE[1]}})
    sense = "forward" if whirl == rotation else "reverse"
    unit = display_unit(kind, system).replace("um", "µm")
    sp = f" at {speed_rpm:.0f} rpm" if speed_rpm is not None else ""
    layout = base_layout(title or f"Orbit{sp}: {sense} whirl ({whirl})", None, 480)
    lim = float(np.nanmax(np.abs(np.concatenate(parts)))) * 1.15 or 1.0
    layout["xaxis"].update(title={"text": f"horizontal ({unit})"}, range=[-lim, lim],
                           zeroline=True, zerolinecolor="#bbbbbb")
    layout["yaxis"].update(title={"text": f"vertical ({unit})"}, range=[-lim, lim],
                           zeroline=True, zerolinecolor="#bbbbbb", scaleanchor="x",
                           scaleratio=1)
    bt = _screen_angle_rad(0.0, rotation, tach_angle_deg)
    data.append({"type": "scatter", "x": [0.97 * lim * math.cos(bt)],
                 "y": [0.97 * lim * math.sin(bt)], "mode": "markers",
                 "name": "once-per-rev sensor", "meta": "sensor",
                 "marker": {"symbol": "triangle-down" if math.sin(bt) > 0.7 else "diamond",
                            "size": 10, "color": "#777777"},
                 "hovertext": "once-per-rev sensor, " + side_of_top(tach_angle_deg, rotation),
                 "hoverinfo": "text"})
    layout["annotations"].append({
        "text": "probe mounting angles applied; top dead centre at the top, once-per-rev "
                f"sensor at {side_of_top(tach_angle_deg, rotation)}; viewed from the driver end",
        "xref": "paper", "yref": "paper", "x": 0, "y": -0.2, "showarrow": False,
        "font": {"size": 10}})
    layout["margin"]["b"] = 80
    layout["meta"] = {"whirl": whirl, "sense": sense}
    return make_figure(data, layout)


# ----------------------------------------------------------------------------- split view
def bearing_modes(entry: Mapping[str, Any], *, kind: str = "proximity",
                  system: UnitSystem = "metric", uirevision: Any = None) -> go.Figure:
    """The split view of one bearing: the run's fitted model as the major axis of the 1X
    orbit against speed (findings ``bearing_modes[]``), each fitted mode marked at its
    steady peak with its direction and whirl, the major-axis criticals with their AF.

    Directions are degrees from the reference sensor in the direction of rotation (the
    convention of the probe angles); a split critical shows as two modes along different
    directions.
    """
    unit = amplitude_label(kind, system)
    curve = entry.get("major_curve") or {}
    rpm = np.asarray(curve.get("speed_rpm") or [], float)
    amp = np.asarray(to_display(np.asarray(curve.get("major_amplitude") or [], float), kind, system))
    split = entry.get("split") or "one mode"
    layout = base_layout(f"Bearing {entry.get('bearing', '?')}: major axis of the fitted 1X "
                         f"orbit ({split})", uirevision, 380)
    data: list[dict[str, Any]] = [
        {"type": "scatter", "x": typed_array(rpm), "y": typed_array(amp), "mode": "lines",
         "name": "major axis, fitted model", "line": {"color": PALETTE[0], "width": 2},
         "meta": "model"}]
    top = float(np.max(amp)) if amp.size else 1.0
    modes = entry.get("modes") or []
    for k, m in enumerate(modes):
        x = m.get("peak_speed_rpm") or m.get("natural_frequency_rpm")
        if x is None:
            continue
        add_vline(layout, x, {"color": PALETTE[(k + 1) % len(PALETTE)], "dash": "dash",
                              "width": 1.5})
        layout["annotations"].append({
            "x": x, "y": top * (1.08 - 0.1 * k), "xref": "x", "yref": "y", "showarrow": False,
            "xanchor": "left", "font": {"size": 11, "color": INK},
            "text": f" mode {m.get('natural_frequency_rpm', 0):.0f} rpm: along "
                    f"{m.get('direction_deg', 0):.0f}°, {m.get('whirl', '?')}"})
    crit = entry.get("criticals") or []
    if crit:
        xs = [c.get("speed_rpm") for c in crit]
        ys = [float(np.interp(x, rpm, amp)) if rpm.size else 0.0 for x in xs]
        data.append({
            "type": "scatter", "x": xs, "y": ys, "mode": "markers+text",
            "name": "major-axis criticals", "meta": "critical",
            "text": [f"{c.get('speed_rpm', 0):.0f} rpm, AF " + (f"{c['af']:.2f}" if c.get("af")
                                                                else "n/a") for c in crit],
            "textposition": "bottom center", "marker": {"size": 10, "color": INK}})
    layout["xaxis"]["title"] = {"text": "speed (rpm)"}
    layout["yaxis"].update(title={"text": f"major axis ({unit})"}, rangemode="tozero")
    layout["meta"] = {"split": entry.get("split") or "",
                      "directions_deg": [m.get("direction_deg") for m in modes]}
    return make_figure(data, layout)
