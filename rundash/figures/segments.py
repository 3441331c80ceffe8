"""Run directions as drawn: the stored segments folded for display, tracks cut by them,
and the time a speed history spends inside a band."""

from __future__ import annotations

from typing import Any, Mapping, Sequence

import numpy as np

from rundash.figures.common import HOLD_SPEED_TOLERANCE, MIN_PIECE_S


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


def track_pieces(track, segments: Sequence[Mapping[str, Any]] | None, *, probe: str,
                 order: float = 1.0, skip_steady: bool = False, min_points: int = 1,
                 **extra: Any) -> list[dict[str, Any]]:
    """A stored track (``time_s``, ``speed_rpm``, ``amplitude``, ``phase_lag_deg``,
    ``direct``, ``compensated``) as the trace dicts the figures draw, one per run
    direction as drawn (:func:`split_by_direction`); ``extra`` keys go into each."""
    out = []
    for direction, idx in split_by_direction(track.time_s, segments):
        if (skip_steady and direction == "steady") or idx.size < min_points:
            continue
        out.append({"probe": probe, "order": float(order), "direction": direction,
                    "time_s": track.time_s[idx], "speed_rpm": track.speed_rpm[idx],
                    "amplitude": track.amplitude[idx], "phase_lag_deg": track.phase_lag_deg[idx],
                    "direct": track.direct[idx], "compensated": track.compensated, **extra})
    return out
