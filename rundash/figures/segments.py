"""Run directions as drawn (the same definition as judged, :mod:`rundash.dsp.directions`),
tracks cut by them into trace dicts, and the time a speed history spends inside a band."""

from __future__ import annotations

from typing import Any, Mapping, Sequence

import numpy as np

from rundash.dsp.directions import direction_segments as drawing_segments
from rundash.dsp.directions import split_by_direction

__all__ = ["drawing_segments", "split_by_direction", "time_in_band", "track_pieces"]


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
