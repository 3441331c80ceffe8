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
comparison_trend  critical speed and AF per run against date, error bars, overhaul cycles
guidance_lines    limit lines and reference zones of a guidance profile for one probe kind
split_by_direction  cut a track into run-up / coast-down / hold pieces by segments
drawing_segments  the run's segments as drawn: blips folded in, one sweep one segment
decimate_minmax   display indices keeping each speed bin's first, last, minimum and maximum
unwrap_phase_deg  phase lag made continuous along a track, for display only
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

import base64
import functools
import math
from typing import Any, Iterable, Literal, Mapping, Sequence

import numpy as np
import plotly.graph_objects as go

from rundash.units import amplitude_label, display_unit, to_display

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
#: A segment shorter than this (s) is drawn as part of the one before it.
MIN_PIECE_S = 10.0
#: A 'steady' segment whose speed changes by more than this fraction of its mean speed
#: is drawn as the sweep it is (display choice of ours, no source).
HOLD_SPEED_TOLERANCE = 0.02


# ----------------------------------------------------------------------------- dict figures
# Figures are assembled as plain dicts (the form plotly.js reads) and wrapped in a
# go.Figure without plotly.py's per-property validation, which costs ~50 ms per figure of
# a few traces; tests/test_figures.py validates every builder's output with go.Figure.
@functools.lru_cache(maxsize=1)
def _template() -> dict:
    import plotly.io as pio

    return pio.templates["simple_white"].to_plotly_json()


def _figure(data: list[dict], layout: dict) -> go.Figure:
    layout = dict(layout, template=_template())
    try:
        return go.Figure(data=data, layout=layout, _validate=False)
    except TypeError:  # a plotly without the private switch: validate (slower)
        return go.Figure(data=data, layout=layout)


def _b64(a) -> dict[str, str]:
    """A 1-D float array in plotly's typed-array form (base64 float64; NaN breaks a line)."""
    a = np.ascontiguousarray(a, dtype="<f8")
    return {"dtype": "f8", "bdata": base64.b64encode(a.tobytes()).decode("ascii")}


def _base_layout(title: str, uirevision: Any, height: int) -> dict[str, Any]:
    axis = {"showgrid": True, "gridcolor": GRID, "zeroline": False, "ticks": "outside"}
    return {
        "title": {"text": title, "x": 0.01, "xanchor": "left", "font": {"size": 15}},
        "font": {"family": "Inter, 'Segoe UI', Arial, sans-serif", "size": 12, "color": INK},
        "height": height, "margin": {"l": 64, "r": 24, "t": 56, "b": 48},
        "legend": {"orientation": "h", "yanchor": "bottom", "y": 1.0, "xanchor": "right",
                   "x": 1.0, "font": {"size": 11}},
        "hovermode": "closest", "uirevision": uirevision, "paper_bgcolor": "white",
        "plot_bgcolor": "white", "xaxis": dict(axis), "yaxis": dict(axis),
        "shapes": [], "annotations": []}


def _axis_ref(row: int | None) -> tuple[str, str]:
    return ("x", "y") if not row or row == 1 else (f"x{row}", f"y{row}")


def _vrect(layout, x0, x1, fill, *, row=None, text=None, position="top left") -> None:
    xr, yr = _axis_ref(row)
    layout["shapes"].append({"type": "rect", "xref": xr, "yref": f"{yr} domain", "x0": x0,
                             "x1": x1, "y0": 0, "y1": 1, "fillcolor": fill,
                             "line": {"width": 0}, "layer": "below"})
    if text:
        vert, side = position.split(" ")
        layout["annotations"].append({
            "text": text, "xref": xr, "yref": f"{yr} domain", "showarrow": False,
            "x": x0 if side == "left" else x1, "xanchor": side,
            "y": 1 if vert == "top" else 0, "yanchor": vert, "font": {"size": 10}})


def _vline(layout, x, line, *, row=None, text=None, position="top right") -> None:
    xr, yr = _axis_ref(row)
    layout["shapes"].append({"type": "line", "xref": xr, "yref": f"{yr} domain", "x0": x,
                             "x1": x, "y0": 0, "y1": 1, "line": line})
    if text:
        layout["annotations"].append({
            "text": text, "xref": xr, "yref": f"{yr} domain", "x": x, "y": 1,
            "xanchor": "left" if position.endswith("right") else "right", "yanchor": "top",
            "showarrow": False, "font": {"size": 10}})


def _hline(layout, y, line, *, row=None, text=None) -> None:
    xr, yr = _axis_ref(row)
    layout["shapes"].append({"type": "line", "xref": f"{xr} domain", "yref": yr, "x0": 0,
                             "x1": 1, "y0": y, "y1": y, "line": line})
    if text:
        layout["annotations"].append({
            "text": text, "xref": f"{xr} domain", "yref": yr, "x": 0, "y": y,
            "xanchor": "left", "yanchor": "bottom", "showarrow": False, "font": {"size": 10}})


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


def drawing_segments(segments: Sequence[Mapping[str, Any]] | None, *,
                     min_piece_s: float = MIN_PIECE_S,
                     hold_tolerance: float = HOLD_SPEED_TOLERANCE) -> list[dict[str, Any]]:
    """The run's segments as they are drawn (display only; stored segments untouched).

    1. A ``'steady'`` segment whose speed changes by more than ``hold_tolerance`` of its
       mean speed (``rpm_start``/``rpm_end``, when stored) is drawn as the run-up or
       coast-down it is; a hold between two segments of one direction takes it.
    2. A segment shorter than ``min_piece_s`` (a blip: a short hold inside a sweep, a few
       seconds of speed hunting) takes the kind of the segment before it (of the first
       long one, at the start of the record). When no segment is long, nothing changes.
    3. Neighbours of the same kind become one segment.

    Returns
    -------
    list of dict
        ``{'kind', 't_start_s', 't_end_s'}`` in time order.
    """
    segs = [dict(s) for s in segments or []]
    kinds = [str(s.get("kind", "mixed")) for s in segs]
    for i, s in enumerate(segs):
        r0, r1 = s.get("rpm_start"), s.get("rpm_end")
        if kinds[i] == "steady" and r0 is not None and r1 is not None:
            mean = 0.5 * (abs(float(r0)) + abs(float(r1)))
            if abs(float(r1) - float(r0)) > hold_tolerance * max(mean, 1e-9):
                kinds[i] = "run-up" if r1 > r0 else "coast-down"
    for i in range(1, len(kinds) - 1):  # a hold inside one sweep belongs to it
        if kinds[i] == "steady" and kinds[i - 1] == kinds[i + 1] != "steady":
            kinds[i] = kinds[i - 1]
    long = [i for i, s in enumerate(segs)
            if float(s["t_end_s"]) - float(s["t_start_s"]) >= min_piece_s]
    if long:
        for i in range(len(segs)):
            if i not in long:
                kinds[i] = kinds[i - 1] if i > 0 else kinds[long[0]]
    merged: list[dict[str, Any]] = []
    for s, k in zip(segs, kinds):
        if merged and merged[-1]["kind"] == k:
            merged[-1]["t_end_s"] = s["t_end_s"]
        else:
            merged.append({"kind": k, "t_start_s": s["t_start_s"], "t_end_s": s["t_end_s"]})
    return merged


def split_by_direction(time_s, segments: Sequence[Mapping[str, Any]] | None, *,
                       min_piece_s: float = MIN_PIECE_S) -> list[tuple[str, np.ndarray]]:
    """Cut a track into pieces by the run's segments, as drawn (:func:`drawing_segments`).

    Parameters
    ----------
    time_s : array_like, shape (n,)
        Track times in s.
    segments : sequence of dict
        Each with ``kind`` and ``t_start_s``/``t_end_s`` (as stored by processing), and
        ``rpm_start``/``rpm_end`` when known.
    min_piece_s : float
        Shortest segment drawn on its own, in s (:func:`drawing_segments`).

    Returns
    -------
    list of (kind, index array)
        One entry per drawn segment that holds points, in time order; all points as
        ``'mixed'`` when there are no segments at all.
    """
    t = np.asarray(time_s, dtype=float)
    if not segments:
        return [("mixed", np.arange(t.size))]
    segments = drawing_segments(segments, min_piece_s=min_piece_s)
    out = []
    for i, s in enumerate(segments):
        last = i == len(segments) - 1
        hi = t <= s["t_end_s"] if last else t < s["t_end_s"]
        idx = np.flatnonzero((t >= s["t_start_s"] if i else True) & hi)
        if idx.size:
            out.append((str(s.get("kind", "mixed")), idx))
    return out


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


def _operating_shapes(layout: dict, op: Mapping[str, float] | None, *, row=None,
                      label=True) -> None:
    if not op or op.get("min_operating_speed_rpm") is None:
        return
    lo, hi = op["min_operating_speed_rpm"], op["max_continuous_speed_rpm"]
    _vrect(layout, lo, hi, OPERATING_FILL, row=row,
           text="operating range" if label else None, position="top left")
    trip = op.get("trip_speed_rpm")
    if trip:
        _vline(layout, trip, {"color": "#777777", "dash": "dot", "width": 1}, row=row,
               text="trip" if label else None)


def _side(c: Mapping[str, Any]) -> str | None:
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
        side, pct = _side(c), c.get("required_margin_pct")
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


def _order_name(order: float) -> str:
    return f"{order:g}X"


def _style(direction: str | None) -> dict[str, str]:
    return DIRECTION_STYLE.get(direction or "mixed", DIRECTION_STYLE["mixed"])


def _groups(traces: Sequence[Mapping[str, Any]], key_fields: tuple[str, ...]
            ) -> list[tuple[tuple, list[Mapping[str, Any]]]]:
    """Traces gathered per key (e.g. probe, order, direction), first-appearance order."""
    out: dict[tuple, list[Mapping[str, Any]]] = {}
    for tr in traces:
        if len(tr["speed_rpm"]) == 0:
            continue
        out.setdefault(tuple(tr.get(k) for k in key_fields), []).append(tr)
    return list(out.items())


def _joined(pieces: Sequence[dict[str, np.ndarray]]) -> dict[str, np.ndarray]:
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


def _display_pieces(group: Sequence[Mapping[str, Any]], kind: str, system: UnitSystem, *,
                    phase: PhaseDisplay | None, max_points: int, fields=("amplitude",),
                    keep_speeds: Sequence[float] = ()) -> dict[str, np.ndarray]:
    """One trace group in display form: units converted, phase unwrapped (on the full
    data), decimated per piece (:func:`decimate_minmax`), pieces joined with gaps."""
    share = max(200, max_points // max(1, len(group)))
    pieces = []
    for tr in group:
        rpm = np.asarray(tr["speed_rpm"], dtype=float)
        arrays = {"rpm": rpm}
        for f in fields:
            arrays[f] = np.asarray(to_display(np.asarray(tr[f], dtype=float), kind, system))
        if phase is not None:
            lag = np.asarray(tr["phase_lag_deg"], dtype=float)
            arrays["phase"] = unwrap_phase_deg(lag, rpm, arrays["amplitude"]) \
                if phase == "unwrapped" else lag
        keep = [_nearest(rpm, s) for s in keep_speeds
                if np.nanmin(rpm) <= s <= np.nanmax(rpm)]
        idx = decimate_minmax(rpm, *[arrays[k] for k in arrays if k != "rpm"],
                              max_points=share, keep=keep)
        pieces.append({k: v[idx] for k, v in arrays.items()})
    return _joined(pieces)


def _crit_speeds(criticals, probe, direction) -> list[float]:
    return [float(c["speed_rpm"]) for c in criticals if c.get("probe") == probe
            and c.get("speed_rpm") and c.get("direction") in (direction, None)]


# ----------------------------------------------------------------------------- bode
def bode(traces: Sequence[Mapping[str, Any]], *, kind: str = "proximity",
         system: UnitSystem = "metric", criticals: Sequence[Mapping[str, Any]] = (),
         operating: Mapping[str, float] | None = None,
         limit_lines: Sequence[Mapping[str, Any]] = (), cursor_rpm: float | None = None,
         compensated: bool = True, phase: PhaseDisplay = "unwrapped",
         title: str | None = None, uirevision: Any = None,
         max_points: int = MAX_POINTS) -> go.Figure:
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
    for (probe, order, direction), group in _groups(traces, ("probe", "order", "direction")):
        key = (probe, order)
        if key not in colors:
            colors[key] = group[0].get("color") or PALETTE[len(colors) % len(PALETTE)]
        if probe not in shown_probes:
            shown_probes.append(probe)
        arr = _display_pieces(group, kind, system, phase=phase, max_points=max_points,
                              keep_speeds=_crit_speeds(criticals, probe, direction)
                              if order == 1 else ())
        first = first or arr
        name = f"{probe} {_order_name(order)} {direction or ''}".strip()
        line = {"color": colors[key], "dash": _style(direction)["dash"],
                "width": 2.0 if order == 1 else 1.4}
        x = _b64(arr["rpm"])
        common = {"type": "scatter", "mode": "lines", "line": line, "name": name,
                  "legendgroup": name, "meta": "data", "customdata": x, "x": x}
        data.append(dict(common, y=_b64(arr["amplitude"]), xaxis="x", yaxis="y",
                         showlegend=True, hovertemplate="%{x:.0f} rpm<br>%{y:.3g} " + unit
                         + f"<extra>{name}</extra>"))
        data.append(dict(common, y=_b64(arr["phase"]), xaxis="x2", yaxis="y2",
                         showlegend=False, hovertemplate="%{x:.0f} rpm<br>%{y:.0f}° lag"
                         + (" (unwrapped)" if phase == "unwrapped" else "")
                         + f"<extra>{name}</extra>"))

    comp = "slow-roll compensated" if compensated else "uncompensated"
    layout = _base_layout(title or f"Bode plot ({comp})", uirevision, 580)
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
    else:
        layout["yaxis2"].update(dtick=90)
        layout["annotations"].append({
            "text": "phase unwrapped along speed (stored values 0–360°)", "xref": "x2 domain",
            "yref": "y2 domain", "x": 0.0, "y": 1.0, "xanchor": "left", "yanchor": "bottom",
            "showarrow": False, "font": {"size": 10, "color": "#666666"}})

    _operating_shapes(layout, operating, row=1)
    _operating_shapes(layout, operating, row=2, label=False)
    for z in margin_zones(criticals, operating):
        for row in (1, 2):
            _vrect(layout, z["lo_rpm"], z["hi_rpm"], MARGIN_FILL, row=row,
                   text=f"required margin {z['pct']:.1f} %" if row == 1 else None,
                   position="bottom left" if z["side"] == "below" else "bottom right")
    shown = [c for c in criticals if c.get("probe") in shown_probes and c.get("speed_rpm")]
    for c in shown:
        if c.get("n1_rpm") and c.get("n2_rpm"):
            _vrect(layout, c["n1_rpm"], c["n2_rpm"], HALF_POWER_FILL, row=1)
        for row in (1, 2):
            _vline(layout, c["speed_rpm"], {"color": INK, "dash": "dot", "width": 1}, row=row)
    if shown:
        amps = [to_display(float(c["peak_amplitude"]), kind, system)
                if c.get("peak_amplitude") is not None else None for c in shown]
        ymax = max([a for a in amps if a is not None] or [1.0])
        data.append({
            "type": "scatter", "xaxis": "x", "yaxis": "y",
            "x": [c["speed_rpm"] for c in shown],
            "y": [float(a) if a is not None else ymax for a in amps],
            "mode": "markers+text", "name": "critical speeds", "meta": "critical",
            "text": [_critical_label(c) for c in shown], "textposition": "top center",
            "textfont": {"size": 11}, "cliponaxis": False,
            "marker": {"symbol": [_style(c.get("direction"))["symbol"] for c in shown],
                       "size": 11, "color": INK, "line": {"color": "white", "width": 1}},
            "customdata": [[i, c["speed_rpm"]] for i, c in enumerate(shown)],
            "hovertext": [_critical_hover(c) for c in shown], "hoverinfo": "text"})
    for ln in limit_lines:
        if ln.get("measure") == "1X" and ln.get("value") is not None:
            _hline(layout, float(to_display(float(ln["value"]), kind, system)),
                   {"color": "#D55E00", "dash": "longdash", "width": 1.5}, row=1,
                   text=ln.get("label", "limit"))
    xs, ya, yp = [], [], []
    if cursor_rpm is not None and first is not None:
        i = _nearest(first["rpm"], cursor_rpm)
        xs, ya, yp = [float(first["rpm"][i])], [float(first["amplitude"][i])], \
            [float(first["phase"][i])]
    mk = {"symbol": "circle-open", "size": 14, "color": CURSOR_COLOR, "line": {"width": 2}}
    for y, ax in ((ya, "y"), (yp, "y2")):
        data.append({"type": "scatter", "x": xs, "y": y, "xaxis": ax.replace("y", "x"),
                     "yaxis": ax, "mode": "markers", "marker": mk, "name": "cursor",
                     "meta": "cursor", "showlegend": False, "hoverinfo": "skip"})
    return _figure(data, layout)


# ----------------------------------------------------------------------------- polar
def _nice_step(span: float, n: int = 8) -> float:
    raw = max(span / n, 1e-9)
    mag = 10 ** math.floor(math.log10(raw))
    for m in (1, 2, 2.5, 5, 10):
        if raw <= m * mag:
            return m * mag
    return 10 * mag


def _spread_labels(marks, li, r, theta_deg, min_gap: float = 0.04):
    """Speed labels that would sit on top of an earlier one (closer than ``min_gap`` of
    the largest radius, e.g. piled at the centre at slow roll) are left out."""
    r_max = float(np.nanmax(r)) if len(r) else 0.0
    kept_m, kept_i, pts = [], [], []
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
          uirevision: Any = None, max_points: int = MAX_POINTS) -> go.Figure:
    """Polar plot of the nX vector: amplitude as radius, phase lag as angle.

    0 deg lag is at the top; lag increases against the direction of rotation (clockwise
    on screen for a ``'ccw'`` machine; common practice, no source). Speed labels are
    placed along each curve every ``label_step_rpm`` (a round step giving about eight
    labels when None); criticals are marked on the curve of their probe and direction.

    Parameters are those of :func:`bode` (the same ``traces`` dicts).
    """
    data: list[dict] = []
    colors: dict[tuple, str] = {}
    groups = _groups(traces, ("probe", "order", "direction"))
    all_rpm = np.concatenate([np.asarray(t["speed_rpm"], float) for _, g in groups for t in g]) \
        if groups else np.array([0.0, 1.0])
    step = label_step_rpm or _nice_step(float(np.ptp(all_rpm)) if all_rpm.size else 1.0)
    unit = amplitude_label(kind, system)
    drawn: dict[tuple, dict[str, np.ndarray]] = {}
    for (probe, order, direction), group in groups:
        key = (probe, order)
        colors.setdefault(key, group[0].get("color") or PALETTE[len(colors) % len(PALETTE)])
        arr = _display_pieces(group, kind, system, phase="wrapped", max_points=max_points,
                              keep_speeds=_crit_speeds(criticals, probe, direction))
        drawn[(probe, order, direction)] = arr
        name = f"{probe} {_order_name(order)} {direction or ''}".strip()
        data.append({
            "type": "scatterpolar", "r": _b64(arr["amplitude"]), "theta": _b64(arr["phase"]),
            "mode": "lines", "name": name, "meta": "data", "customdata": _b64(arr["rpm"]),
            "line": {"color": colors[key], "dash": _style(direction)["dash"], "width": 2},
            "hovertemplate": "%{customdata:.0f} rpm<br>%{r:.3g} " + unit
            + " ∠ %{theta:.0f}°<extra>" + name + "</extra>"})
        # speed labels where the curve passes each multiple of the step
        rpm = arr["rpm"]
        marks = np.arange(math.ceil(np.nanmin(rpm) / step) * step, np.nanmax(rpm) + 1e-9, step)
        li = [_nearest(rpm, m) for m in marks]
        marks, li = _spread_labels(marks, li, arr["amplitude"], arr["phase"])
        data.append({
            "type": "scatterpolar", "r": arr["amplitude"][li].tolist(),
            "theta": arr["phase"][li].tolist(), "mode": "markers+text",
            "text": [f"{m:.0f}" for m in marks], "textposition": "top right",
            "textfont": {"size": 10, "color": colors[key]},
            "marker": {"size": 5, "color": colors[key]}, "name": f"{name} speed labels (rpm)",
            "showlegend": False, "hoverinfo": "skip", "meta": "labels"})
    shown = []
    for c in criticals:
        arr = next((a for (p, o, d), a in drawn.items() if p == c.get("probe")
                    and d == c.get("direction") and o == 1), None)
        if arr is None or not c.get("speed_rpm"):
            continue
        i = _nearest(arr["rpm"], c["speed_rpm"])
        shown.append((c, float(arr["amplitude"][i]), float(arr["phase"][i])))
    if shown:
        data.append({
            "type": "scatterpolar", "r": [s[1] for s in shown], "theta": [s[2] for s in shown],
            "mode": "markers+text", "name": "critical speeds", "meta": "critical",
            "text": [_critical_label(s[0]) for s in shown], "textposition": "bottom center",
            "textfont": {"size": 11}, "customdata": [s[0]["speed_rpm"] for s in shown],
            "hovertext": [_critical_hover(s[0]) for s in shown], "hoverinfo": "text",
            "marker": {"size": 12, "color": INK, "line": {"color": "white", "width": 1},
                       "symbol": [_style(s[0].get("direction"))["symbol"] for s in shown]}})
    r, th = [], []
    if cursor_rpm is not None and drawn:
        arr = next(iter(drawn.values()))
        i = _nearest(arr["rpm"], cursor_rpm)
        r, th = [float(arr["amplitude"][i])], [float(arr["phase"][i])]
    data.append({"type": "scatterpolar", "r": r, "theta": th, "mode": "markers",
                 "name": "cursor", "meta": "cursor", "showlegend": False, "hoverinfo": "skip",
                 "marker": {"symbol": "circle-open", "size": 14, "color": CURSOR_COLOR,
                            "line": {"width": 2}}})
    layout = _base_layout(title or "Polar plot", uirevision, 580)
    layout.pop("xaxis")
    layout.pop("yaxis")
    layout["polar"] = {
        "domain": {"x": [0, 1], "y": [0.04, 1]},
        "angularaxis": {"rotation": 90, "direction": "clockwise" if rotation == "ccw"
                        else "counterclockwise", "dtick": 30, "gridcolor": GRID,
                        "ticksuffix": "°"},
        "radialaxis": {"gridcolor": GRID, "angle": 90, "tickangle": 90,
                       "ticksuffix": " " + unit.split(" ")[0]}}
    layout["legend"] = {"orientation": "h", "yanchor": "top", "y": -0.06, "xanchor": "left",
                        "x": 0, "font": {"size": 11}}
    layout["margin"] = {"l": 40, "r": 40, "t": 56, "b": 96}
    layout["annotations"].append({
        "text": f"radius {unit}; angle: phase lag (deg), rising against {rotation} rotation; "
                "labels: rpm", "xref": "paper", "yref": "paper", "x": 0, "y": 0.0,
        "xanchor": "left", "yanchor": "top", "showarrow": False, "font": {"size": 10}})
    return _figure(data, layout)


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
    data = [{"type": "scatter", "x": _b64(t[idx]), "y": _b64(n[idx]), "mode": "lines",
             "name": "speed", "meta": "data", "line": {"color": PALETTE[0], "width": 2},
             "hovertemplate": "%{x:.1f} s<br>%{y:.0f} rpm<extra></extra>"}]
    layout = _base_layout(title or "Speed versus time", uirevision, 360)
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
        lines = [f"{b['lo']:.0f}–{b['hi']:.0f} rpm (critical {_fmt(b['c'].get('speed_rpm'))} rpm):"
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
    return _figure(data, layout)


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
    data: list[dict] = []
    layout = _base_layout(title or "Direct (unfiltered) level beside 1X", uirevision, 480)
    for k, ((probe, direction), group) in enumerate(_groups(traces, ("probe", "direction"))):
        color = group[0].get("color") or PALETTE[k % len(PALETTE)]
        dash = _style(direction)["dash"]
        arr = _display_pieces(group, kind, system, phase=None, max_points=max_points,
                              fields=("direct", "amplitude"))
        base = f"{probe} {direction or ''}".strip()
        x = _b64(arr["rpm"])
        data.append({"type": "scatter", "x": x, "y": _b64(arr["direct"]), "mode": "lines",
                     "name": f"{base} direct", "meta": "data",
                     "line": {"color": color, "dash": dash, "width": 2.2}})
        data.append({"type": "scatter", "x": x, "y": _b64(arr["amplitude"]), "mode": "lines",
                     "name": f"{base} 1X", "meta": "data", "opacity": 0.75,
                     "line": {"color": color, "dash": dash, "width": 1}})
    _operating_shapes(layout, operating)
    _add_limit_lines(data, layout, limit_lines, kind, system)
    tops = [float(np.nanmax(to_display(np.asarray(t["direct"], float), kind, system)))
            for t in traces if len(t["direct"])]
    tops += [float(to_display(float(ln["value"]), kind, system)) for ln in limit_lines
             if ln.get("value") is not None]
    if tops:  # reference zones far above the levels are clipped (zoom out to see them)
        layout["yaxis"]["range"] = [0, 1.25 * max(tops)]
    u = display_unit(kind, system).replace("um", "µm")
    ytitle = (f"amplitude ({u} pp)" if kind == "proximity"
              else f"amplitude ({u}; direct rms, 1X pk)")
    layout.update(legend={"orientation": "h", "yanchor": "top", "y": -0.18, "x": 0,
                          "xanchor": "left"}, margin={"l": 64, "r": 24, "t": 56, "b": 120})
    layout["xaxis"]["title"] = {"text": "speed (rpm)"}
    layout["yaxis"]["title"] = {"text": ytitle}
    return _figure(data, layout)


def _add_limit_lines(data, layout, limit_lines, kind, system) -> None:
    for ln in limit_lines:
        color = "#D55E00" if ln.get("verdict_line", True) else "#777777"
        if ln.get("value") is not None:
            x0, x1 = ln.get("applies_rpm") or (None, None)
            y = float(to_display(float(ln["value"]), kind, system))
            if x0 is None:
                _hline(layout, y, {"color": color, "dash": "longdash", "width": 1.5},
                       text=ln.get("label", "limit"))
            else:
                data.append({"type": "scatter", "x": [x0, x1], "y": [y, y],
                             "mode": "lines+text", "name": ln.get("label", "limit"),
                             "meta": "limit",
                             "line": {"color": color, "dash": "longdash", "width": 2},
                             "text": ["", ln.get("label", "limit")],
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
        cite = zone_cite(SHAFT_DISPLACEMENT)
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
    data: list[dict] = [{
        "type": "heatmap", "x": _b64(f), "y": _b64(rpm), "z": zlog.tolist(),
        "customdata": a.tolist(), "colorscale": "Cividis", "meta": "data",
        "zmin": math.log10(floor), "zmax": math.log10(peak),
        "colorbar": {"title": {"text": unit + " (log)", "side": "right"}, "thickness": 14,
                     "tickvals": decades.tolist(),
                     "ticktext": [f"{10.0 ** d:g}" for d in decades]},
        "hovertemplate": "%{x:.1f} Hz<br>%{y:.0f} rpm<br>%{customdata:.3g} " + unit
        + "<extra></extra>"}]
    top = float(rpm.max()) if rpm.size else 1.0
    fmax = float(f.max()) if f.size else 1.0
    for o in orders:
        n_end = min(top, 60.0 * fmax / o)
        data.append({"type": "scatter", "x": [0, o * n_end / 60.0], "y": [0, n_end],
                     "mode": "lines+text", "name": f"{_order_name(o)} line", "meta": "order",
                     "text": ["", _order_name(o)], "textposition": "middle right",
                     "line": {"color": "white", "width": 1, "dash": "dot"},
                     "textfont": {"color": INK, "size": 11}, "showlegend": False,
                     "hoverinfo": "skip"})
    layout = _base_layout(title or f"Cascade {probe}".strip(), uirevision, 460)
    shown_f = min(fmax, 1.5 * max(orders or [1]) * top / 60.0)
    layout["xaxis"].update(title={"text": "frequency (Hz)"}, range=[0, shown_f], showgrid=False)
    layout["yaxis"].update(title={"text": "speed (rpm)"},
                           range=[float(rpm.min()) if rpm.size else 0, top], showgrid=False)
    return _figure(data, layout)


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
                     "mode": "lines+text", "name": f"{_order_name(o)}", "meta": "order",
                     "text": ["", _order_name(o)], "textposition": "top left",
                     "line": {"color": PALETTE[k % len(PALETTE)], "width": 1.5}})
    fmax = max(orders) * top / 60.0 if orders else top / 60.0
    layout = _base_layout(title or "Campbell (interference) diagram", uirevision, 460)
    _operating_shapes(layout, operating)
    crit = [c for c in criticals if c.get("speed_rpm")]
    if crit:
        data.append({
            "type": "scatter", "x": [c["speed_rpm"] for c in crit],
            "y": [c["speed_rpm"] / 60.0 for c in crit], "mode": "markers",
            "name": "critical speeds (measured, 1X)", "meta": "critical",
            "marker": {"size": 11, "color": INK,
                       "symbol": [_style(c.get("direction"))["symbol"] for c in crit]},
            "hovertext": [_critical_hover(c) for c in crit], "hoverinfo": "text"})
    xs, ys, tx = [], [], []
    for fn in natural_frequencies_hz:
        _hline(layout, fn, {"color": "#CC79A7", "dash": "dash", "width": 1.5},
               text=f"natural frequency {fn:g} Hz")
        for o in orders:
            n = 60.0 * fn / o
            if n <= top:
                xs.append(n)
                ys.append(fn)
                tx.append(f"{_order_name(o)} meets {fn:g} Hz at {n:.0f} rpm")
    if xs:
        data.append({"type": "scatter", "x": xs, "y": ys, "mode": "markers",
                     "name": "interference points", "meta": "interference", "hovertext": tx,
                     "hoverinfo": "text",
                     "marker": {"size": 9, "color": "#CC79A7", "symbol": "x"}})
    layout["xaxis"].update(title={"text": "speed (rpm)"}, range=[0, top])
    layout["yaxis"].update(title={"text": "frequency (Hz)"},
                           range=[0, max(fmax, *(list(natural_frequencies_hz) or [0])) * 1.05])
    return _figure(data, layout)


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
        style = _style(direction)
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
    layout = _base_layout(title or f"Critical speed and AF per run, {probe}", uirevision, 560)
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
            _vrect(layout, b["x0"], b["x1"], _rgba(b["color"], CYCLE_FILL_ALPHA), row=row)
            # the cycle's edge as a line too: a cycle of one day has a band too thin to see
            _vline(layout, b["x0"], {"color": b["color"], "width": 2}, row=row)
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
    return _figure(data, layout)
