"""Run directions of a record: which blocks belong to its run-up and its coast-down.

One definition for what is judged (the findings, the comparison) and what is drawn
(:mod:`rundash.figures`): the stored segments (:func:`rundash.dsp.speed.segment`) are
folded by :func:`direction_segments` (a short hold or a few seconds of speed hunting
inside a sweep belong to the sweep), then cut into pieces by :func:`split_by_direction`;
:func:`direction_masks` keeps the run-up and coast-down pieces that hold at least
:data:`MIN_BLOCKS` blocks. Segments may be :class:`~rundash.dsp.speed.Segment` objects or
their stored dicts. Pure numpy, no I/O.
"""

from __future__ import annotations

from dataclasses import asdict, is_dataclass
from typing import Any, Mapping, Sequence

import numpy as np

#: Fewer blocks (revolutions) than this in a direction: nothing to judge there.
MIN_BLOCKS = 20
#: A segment shorter than this (s) belongs to the one before it.
MIN_PIECE_S = 10.0
#: A 'steady' segment whose speed changes by more than this fraction of its mean speed
#: is the sweep it is (common practice, no source).
HOLD_SPEED_TOLERANCE = 0.02


def _as_dict(s) -> dict[str, Any]:
    return asdict(s) if is_dataclass(s) else dict(s)


def direction_segments(segments: Sequence[Mapping[str, Any]] | None, *,
                     min_piece_s: float = MIN_PIECE_S,
                     hold_tolerance: float = HOLD_SPEED_TOLERANCE) -> list[dict[str, Any]]:
    """The run's segments as they are judged and drawn (stored segments untouched).

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
    segs = [_as_dict(s) for s in segments or []]
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
    """Cut a track into pieces by the run's segments (:func:`direction_segments`).

    Parameters
    ----------
    time_s : array_like, shape (n,)
        Track times in s.
    segments : sequence of dict
        Each with ``kind`` and ``t_start_s``/``t_end_s`` (as stored by processing), and
        ``rpm_start``/``rpm_end`` when known.
    min_piece_s : float
        Shortest segment that stands on its own, in s (:func:`direction_segments`).

    Returns
    -------
    list of (kind, index array)
        One entry per drawn segment that holds points, in time order; all points as
        ``'mixed'`` when there are no segments at all.
    """
    t = np.asarray(time_s, dtype=float)
    if not segments:
        return [("mixed", np.arange(t.size))]
    segments = direction_segments(segments, min_piece_s=min_piece_s)
    out = []
    for i, s in enumerate(segments):
        last = i == len(segments) - 1
        hi = t <= s["t_end_s"] if last else t < s["t_end_s"]
        idx = np.flatnonzero((t >= s["t_start_s"] if i else True) & hi)
        if idx.size:
            out.append((str(s.get("kind", "mixed")), idx))
    return out


def direction_masks(time_s, segments: Sequence[Any] | None, *,
                    min_blocks: int = MIN_BLOCKS) -> dict[str, np.ndarray]:
    """Boolean masks over ``time_s`` of the run-up and the coast-down (each the union of
    its pieces, :func:`split_by_direction`), for directions with ``min_blocks`` or more.

    >>> t = np.arange(100.0)
    >>> segs = [{"kind": "run-up", "t_start_s": 0.0, "t_end_s": 60.0},
    ...         {"kind": "coast-down", "t_start_s": 60.0, "t_end_s": 99.0}]
    >>> {k: int(m.sum()) for k, m in direction_masks(t, segs).items()}
    {'run-up': 60, 'coast-down': 40}
    """
    t = np.asarray(time_s, dtype=float)
    out: dict[str, np.ndarray] = {}
    if not segments:
        return out
    for kind, idx in split_by_direction(t, segments):
        if kind in ("run-up", "coast-down"):
            m = out.setdefault(kind, np.zeros(t.size, dtype=bool))
            m[idx] = True
    return {k: m for k, m in out.items() if int(m.sum()) >= min_blocks}
