"""Shared pieces of the figure builders: the style (Okabe-Ito colours, dashes and markers
per run direction), plain-dict figures, shapes, decimation and phase unwrapping for
display, and the formatting of hover labels."""

from __future__ import annotations

import base64
import functools
import math
from typing import Any, Iterable, Literal, Mapping, Sequence

import numpy as np
import plotly.graph_objects as go

from rundash.units import to_display

UnitSystem = Literal["metric", "imperial"]
PhaseDisplay = Literal["unwrapped", "wrapped"]

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
#: Phase is not drawn where the amplitude is below this fraction of its trace's peak: the
#: lag of a vector near zero (slow roll after compensation) swings at random (our display
#: choice; stated on every figure that applies it, see :data:`PHASE_FLOOR_NOTE`).
PHASE_FLOOR_FRACTION = 0.05
PHASE_FLOOR_NOTE = (f"no phase below {100 * PHASE_FLOOR_FRACTION:.0f} % of its peak amplitude "
                    "(noise)")
UNWRAPPED_NOTE = "lag unwrapped: continued past 360° (stored lag = shown − k·360°)"



# ----------------------------------------------------------------------------- dict figures
# Figures are assembled as plain dicts (the form plotly.js reads) and wrapped in a
# go.Figure without plotly.py's per-property validation, which costs ~50 ms per figure of
# a few traces; tests/test_figures.py validates every builder's output with go.Figure.
#: The trace types rundash draws; the template keeps only their defaults.
TRACE_TYPES = ("scatter", "scatterpolar", "heatmap", "bar")


@functools.lru_cache(maxsize=1)
def plot_template() -> dict:
    """plotly's "simple_white" template cut to what rundash's figures use (2-D and polar
    axes, the trace types in :data:`TRACE_TYPES`): the full one is ~8.6 kB that every
    figure copies on the server and sends to the browser; this one ~3 kB, drawn the same."""
    import plotly.io as pio

    t = pio.templates["simple_white"].to_plotly_json()
    layout = {k: v for k, v in t["layout"].items() if k not in ("ternary", "scene", "geo")}
    data = {k: v for k, v in t["data"].items() if k in TRACE_TYPES}
    return {"layout": layout, "data": data}


def make_figure(data: list[dict], layout: dict) -> go.Figure:
    layout = dict(layout, template=plot_template())
    try:
        return go.Figure(data=data, layout=layout, _validate=False)
    except TypeError:  # a plotly without the private switch: validate (slower)
        return go.Figure(data=data, layout=layout)


def typed_array(a, dtype: Literal["f8", "f4"] = "f8") -> dict[str, str]:
    """A float array in plotly's typed-array form (base64; NaN breaks a line): float64 by
    default, float32 (``dtype='f4'``, 7 significant digits) where that is plenty, e.g. a
    cascade's colour values, at half the bytes. A 2-D array carries its ``shape``
    (``'rows, columns'``, as plotly.py writes it), which plotly.js decodes row by row."""
    a = np.ascontiguousarray(a, dtype="<" + dtype)
    out = {"dtype": dtype, "bdata": base64.b64encode(a.tobytes()).decode("ascii")}
    if a.ndim > 1:
        out["shape"] = ", ".join(str(n) for n in a.shape)
    return out


def base_layout(title: str, uirevision: Any, height: int) -> dict[str, Any]:
    axis = {"showgrid": True, "gridcolor": GRID, "zeroline": False, "ticks": "outside",
            "ticklabeloverflow": "allow"}
    return {
        "title": {"text": title, "x": 0.01, "xanchor": "left", "font": {"size": 15}},
        "font": {"family": "Inter, 'Segoe UI', Arial, sans-serif", "size": 12, "color": INK},
        "height": height, "margin": {"l": 64, "r": 24, "t": 56, "b": 48},
        "legend": {"orientation": "h", "yanchor": "bottom", "y": 1.0, "xanchor": "right",
                   "x": 1.0, "font": {"size": 11}},
        "hovermode": "closest", "uirevision": uirevision, "paper_bgcolor": "white",
        "plot_bgcolor": "white", "xaxis": dict(axis), "yaxis": dict(axis),
        "shapes": [], "annotations": []}


def limit_label(line: Mapping[str, Any], kind: str, system: UnitSystem) -> str:
    """A limit line's legend text with its value in the display system (``title`` and
    ``value`` of :func:`rundash.figures.guidance_lines`; its stored ``label`` otherwise)."""
    from rundash.units import LEVEL_CONVENTION, VECTOR_AMPLITUDE_CONVENTION, display_unit

    if line.get("title") is None or line.get("value") is None:
        return str(line.get("label", "limit"))
    conv = (VECTOR_AMPLITUDE_CONVENTION if line.get("measure") == "1X" else LEVEL_CONVENTION)
    unit = display_unit(kind, system).replace("um", "µm")
    value = float(to_display(float(line["value"]), kind, system))
    digits = 2 if system == "imperial" else 1
    return f"{line['title']}: {value:.{digits}f} {unit} {conv[kind]}"


def message_figure(message: str, *, title: str | None = None, height: int = 300) -> go.Figure:
    """A figure that says why there is nothing to draw: no axes, one centred message."""
    layout = base_layout(title or "", None, height)
    layout["xaxis"] = {"visible": False}
    layout["yaxis"] = {"visible": False}
    layout["annotations"].append({"text": message, "showarrow": False, "xref": "paper",
                                  "yref": "paper", "x": 0.5, "y": 0.5,
                                  "font": {"size": 14, "color": "#666666"}})
    return make_figure([], layout)


def polar_layout(title: str, uirevision: Any, height: int, *, rotation: str,
                 radial_suffix: str = "", bottom: float = 0.04) -> dict[str, Any]:
    """Layout of a polar plot: 0° lag at the top, lag rising against the machine's
    ``rotation`` (clockwise on screen for ``'ccw'``; common practice, no source)."""
    layout = base_layout(title, uirevision, height)
    layout.pop("xaxis")
    layout.pop("yaxis")
    layout["polar"] = {
        "domain": {"x": [0, 1], "y": [bottom, 1]},
        "angularaxis": {"rotation": 90, "direction": "clockwise" if rotation == "ccw"
                        else "counterclockwise", "dtick": 30, "gridcolor": GRID,
                        "ticksuffix": "°"},
        "radialaxis": {"gridcolor": GRID, "angle": 90, "tickangle": 90,
                       **({"ticksuffix": radial_suffix} if radial_suffix else {})}}
    return layout


def blank_weak_phase(phase_deg, amplitude, peak: float | None = None, *,
                     fraction: float = PHASE_FLOOR_FRACTION) -> np.ndarray:
    """``phase_deg`` with NaN where ``amplitude`` is below ``fraction`` of ``peak`` (the
    amplitude's own largest value when None); display only."""
    ph = np.array(phase_deg, dtype=float)
    a = np.asarray(amplitude, dtype=float)
    if peak is None:
        peak = float(np.nanmax(a)) if np.isfinite(a).any() else 0.0
    with np.errstate(invalid="ignore"):
        ph[~(a >= fraction * peak)] = np.nan
    return ph


def break_at_wraps(x, phase_deg) -> tuple[np.ndarray, np.ndarray]:
    """(x, phase) with a NaN point between neighbours whose wrapped lag jumps by more than
    180° (a wrap through 0/360), so that a line does not cross the plot at each wrap."""
    x = np.asarray(x, dtype=float)
    ph = np.asarray(phase_deg, dtype=float)
    with np.errstate(invalid="ignore"):
        jumps = np.flatnonzero(np.abs(np.diff(ph)) > 180.0) + 1
    if jumps.size == 0:
        return x, ph
    return np.insert(x, jumps, np.nan), np.insert(ph, jumps, np.nan)


def axis_ref(row: int | None) -> tuple[str, str]:
    return ("x", "y") if not row or row == 1 else (f"x{row}", f"y{row}")


def add_vrect(layout, x0, x1, fill, *, row=None, text=None, position="top left") -> None:
    xr, yr = axis_ref(row)
    layout["shapes"].append({"type": "rect", "xref": xr, "yref": f"{yr} domain", "x0": x0,
                             "x1": x1, "y0": 0, "y1": 1, "fillcolor": fill,
                             "line": {"width": 0}, "layer": "below"})
    if text:
        vert, side = position.split(" ")
        layout["annotations"].append({
            "text": text, "xref": xr, "yref": f"{yr} domain", "showarrow": False,
            "x": x0 if side == "left" else x1, "xanchor": side,
            "y": 1 if vert == "top" else 0, "yanchor": vert, "font": {"size": 10}})


def add_vline(layout, x, line, *, row=None, text=None, position="top right") -> None:
    xr, yr = axis_ref(row)
    layout["shapes"].append({"type": "line", "xref": xr, "yref": f"{yr} domain", "x0": x,
                             "x1": x, "y0": 0, "y1": 1, "line": line})
    if text:
        layout["annotations"].append({
            "text": text, "xref": xr, "yref": f"{yr} domain", "x": x, "y": 1,
            "xanchor": "left" if position.endswith("right") else "right", "yanchor": "top",
            "showarrow": False, "font": {"size": 10}})


def add_hline(layout, y, line, *, row=None, text=None) -> None:
    xr, yr = axis_ref(row)
    layout["shapes"].append({"type": "line", "xref": f"{xr} domain", "yref": yr, "x0": 0,
                             "x1": 1, "y0": y, "y1": y, "line": line})
    if text:
        layout["annotations"].append({
            "text": text, "xref": f"{xr} domain", "yref": yr, "x": 0, "y": y,
            "xanchor": "left", "yanchor": "bottom", "showarrow": False, "font": {"size": 10}})


# ----------------------------------------------------------------------------- helpers
def fmt_number(x: Any, digits: int = 0, unit: str = "") -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "–"
    return f"{x:,.{digits}f}{(' ' + unit) if unit else ''}"


def nearest_index(speed_rpm: np.ndarray, target: float) -> int:
    return int(np.nanargmin(np.abs(np.asarray(speed_rpm, dtype=float) - target)))


def critical_label(c: Mapping[str, Any]) -> str:
    af = c.get("af_governing")
    return f"{fmt_number(c.get('speed_rpm'))} rpm" + (f", AF {af:.1f}" if af is not None else "")


def critical_hover(c: Mapping[str, Any]) -> str:
    parts = [f"<b>critical {fmt_number(c.get('speed_rpm'))} rpm</b> ({c.get('direction', '?')})",
             f"probe {c.get('probe', '?')}",
             f"AF {fmt_number(c.get('af_governing'), 1)} ({c.get('af_method') or 'method ?'})",
             f"margin {fmt_number(c.get('separation_margin_pct'), 1, '%')} found, "
             f"{fmt_number(c.get('required_margin_pct'), 1, '%')} required: "
             f"{c.get('margin_verdict') or '–'}",
             f"confidence {c.get('confidence') or '–'}"]
    return "<br>".join(parts)


def add_operating_shapes(layout: dict, op: Mapping[str, float] | None, *, row=None,
                      label=True) -> None:
    if not op or op.get("min_operating_speed_rpm") is None:
        return
    lo, hi = op["min_operating_speed_rpm"], op["max_continuous_speed_rpm"]
    add_vrect(layout, lo, hi, OPERATING_FILL, row=row,
           text="operating range" if label else None, position="top left")
    trip = op.get("trip_speed_rpm")
    if trip:
        add_vline(layout, trip, {"color": "#777777", "dash": "dot", "width": 1}, row=row,
               text="trip" if label else None)


def critical_side(c: Mapping[str, Any]) -> str | None:
    """A critical's side of the operating range (findings key ``side``; older dicts used
    ``margin_side``)."""
    return c.get("side") or c.get("margin_side")


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
        side, pct = critical_side(c), c.get("required_margin_pct")
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


def order_name(order: float) -> str:
    return f"{order:g}X"


def direction_style(direction: str | None) -> dict[str, str]:
    return DIRECTION_STYLE.get(direction or "mixed", DIRECTION_STYLE["mixed"])


def trace_groups(traces: Sequence[Mapping[str, Any]], key_fields: tuple[str, ...]
            ) -> list[tuple[tuple, list[Mapping[str, Any]]]]:
    """Traces gathered per key (e.g. probe, order, direction), first-appearance order."""
    out: dict[tuple, list[Mapping[str, Any]]] = {}
    for tr in traces:
        if len(tr["speed_rpm"]) == 0:
            continue
        out.setdefault(tuple(tr.get(k) for k in key_fields), []).append(tr)
    return list(out.items())


def join_pieces(pieces: Sequence[dict[str, np.ndarray]]) -> dict[str, np.ndarray]:
    """Arrays of several pieces joined, a NaN point between pieces (a gap in the line)."""
    if len(pieces) == 1:
        return pieces[0]
    out = {}
    for k in pieces[0]:
        parts = []
        for j, p in enumerate(pieces):
            if j:
                parts.append(np.array([np.nan]))
            parts.append(p[k])
        out[k] = np.concatenate(parts)
    return out


def display_pieces(group: Sequence[Mapping[str, Any]], kind: str, system: UnitSystem, *,
                    phase: PhaseDisplay | None, max_points: int, fields=("amplitude",),
                    keep_speeds: Sequence[float] = (), blank_phase: bool = False
                    ) -> dict[str, np.ndarray]:
    """One trace group in display form: units converted, phase unwrapped (on the full
    data), with ``blank_phase`` set to NaN where the amplitude is below
    :data:`PHASE_FLOOR_FRACTION` of the group's peak, decimated per piece
    (:func:`decimate_minmax`), pieces joined with gaps."""
    share = max(200, max_points // max(1, len(group)))
    pieces = []
    amps = [np.asarray(tr[fields[0]], dtype=float) for tr in group]
    peak = max((float(np.nanmax(a)) for a in amps if np.isfinite(a).any()), default=0.0)
    for tr in group:
        rpm = np.asarray(tr["speed_rpm"], dtype=float)
        arrays = {"rpm": rpm}
        for f in fields:
            arrays[f] = np.asarray(to_display(np.asarray(tr[f], dtype=float), kind, system))
        if phase is not None:
            lag = np.asarray(tr["phase_lag_deg"], dtype=float)
            shown = unwrap_phase_deg(lag, rpm, arrays["amplitude"]) \
                if phase == "unwrapped" else lag
            # weak vectors: no phase drawn (the floor relative to the group's peak)
            arrays["phase"] = blank_weak_phase(shown, tr[fields[0]], peak) if blank_phase \
                else shown
        keep = [nearest_index(rpm, s) for s in keep_speeds
                if np.nanmin(rpm) <= s <= np.nanmax(rpm)]
        idx = decimate_minmax(rpm, *[arrays[k] for k in arrays if k != "rpm"],
                              max_points=share, keep=keep)
        pieces.append({k: v[idx] for k, v in arrays.items()})
    return join_pieces(pieces)


def critical_speeds_of(criticals, probe, direction) -> list[float]:
    return [float(c["speed_rpm"]) for c in criticals if c.get("probe") == probe
            and c.get("speed_rpm") and c.get("direction") in (direction, None)]



# ----------------------------------------------------------------------------- decimation
def decimate_minmax(speed_rpm, *values, max_points: int = MAX_POINTS,
                    keep: Iterable[int] = ()) -> np.ndarray:
    """Indices to draw of a long track: per speed bin its first, last, min and max points.

    The speed range is cut into equal bins; each stretch of consecutive points inside one
    bin keeps its first and last point and, for every array in ``values``, the point of
    its minimum and of its maximum. Every local extreme wider than a bin, the global peak
    above all, is therefore drawn at its exact value and speed. Where the speed dithers
    across bin edges (more stretches than bins), equal index blocks are used instead.

    Parameters
    ----------
    speed_rpm : array_like, shape (n,)
        Speed of each point, in time order.
    *values : array_like, shape (n,)
        Arrays whose extremes must survive (e.g. amplitude and phase lag). NaN is ignored.
    max_points : int
        About the largest number of indices returned (at most ``max_points`` plus
        ``len(keep)``).
    keep : iterable of int
        Indices always kept (e.g. the points nearest the critical speeds).

    Returns
    -------
    numpy.ndarray of int
        Sorted unique indices into the track.
    """
    x = np.asarray(speed_rpm, dtype=float)
    n = x.size
    if n <= max_points:
        return np.arange(n)
    per_bin = 2 + 2 * len(values)
    n_bins = max(1, max_points // per_bin)
    finite = np.isfinite(x)
    lo, hi = (float(np.min(x[finite])), float(np.max(x[finite]))) if finite.any() else (0, 1)
    b = np.full(n, -1, dtype=np.int64)
    b[finite] = np.clip(((x[finite] - lo) / ((hi - lo) or 1.0) * n_bins).astype(np.int64),
                        0, n_bins - 1)
    starts = np.concatenate([[0], np.flatnonzero(b[1:] != b[:-1]) + 1])
    if starts.size > n_bins:
        starts = np.unique(np.linspace(0, n, n_bins, endpoint=False).astype(np.int64))
    lengths = np.diff(np.append(starts, n))
    seg = np.repeat(np.arange(starts.size), lengths)
    sel = [starts, starts + lengths - 1, np.asarray(list(keep), dtype=np.int64)]
    for v in values:
        v = np.asarray(v, dtype=float)
        for fill, red in ((-np.inf, np.maximum), (np.inf, np.minimum)):
            w = np.where(np.isnan(v), fill, v)
            ext = red.reduceat(w, starts)
            hit = np.flatnonzero(w == ext[seg])
            _, first = np.unique(seg[hit], return_index=True)
            sel.append(hit[first])
    idx = np.unique(np.concatenate(sel))
    return idx[(idx >= 0) & (idx < n)]


def unwrap_phase_deg(phase_lag_deg, speed_rpm, amplitude=None, *,
                     min_fraction: float = 0.05) -> np.ndarray:
    """Phase lag made continuous along a track, for display (stored values stay 0..360).

    Consecutive points are put on the branch (``lag + k 360``) nearest their neighbour, so
    a critical's ~180 deg rise is drawn as one climb. Points whose amplitude is below
    ``min_fraction`` of the track's peak (slow roll after compensation: phase is noise)
    follow the branch of the nearest stronger point instead of steering the unwrapping.
    The whole track is then shifted by a multiple of 360 so that it starts in [0, 360) at
    its lowest speed.

    Parameters
    ----------
    phase_lag_deg : array_like, shape (n,)
        Phase lag in degrees, in time order.
    speed_rpm : array_like, shape (n,)
    amplitude : array_like, shape (n,), optional
        Amplitude of each point (any unit); all points count when None.
    min_fraction : float
        Threshold relative to the peak amplitude, see above (our display choice).

    Returns
    -------
    numpy.ndarray, shape (n,)
        ``lag + 360 k`` with integer ``k`` per point; NaN where the lag is NaN.
    """
    lag = np.asarray(phase_lag_deg, dtype=float)
    rpm = np.asarray(speed_rpm, dtype=float)
    n = lag.size
    ok = np.isfinite(lag)
    if amplitude is not None:
        a = np.asarray(amplitude, dtype=float)
        peak = np.nanmax(a) if np.isfinite(a).any() else 0.0
        strong = ok & np.isfinite(a) & (a >= min_fraction * peak)
        if strong.sum() < 2:
            strong = ok
    else:
        strong = ok
    if strong.sum() == 0:
        return lag.copy()
    pos = np.flatnonzero(strong)
    ref_strong = np.unwrap(lag[pos], period=360.0)
    ref = np.interp(np.arange(n), pos, ref_strong)
    out = lag + 360.0 * np.round((ref - lag) / 360.0)
    out[~ok] = np.nan
    cand = pos if np.isfinite(rpm[pos]).any() else np.flatnonzero(ok)
    start = cand[np.nanargmin(np.where(np.isfinite(rpm[cand]), rpm[cand], np.inf))]
    return out - 360.0 * math.floor(out[start] / 360.0)
