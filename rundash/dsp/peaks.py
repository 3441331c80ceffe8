"""Local maxima of a sampled curve and their prominences, in numpy alone.

The same peaks and prominences as :func:`scipy.signal.find_peaks` with a ``prominence``
lower bound and no other condition (tested against it): a peak is a sample, or the middle
of a flat run of samples (the left one of the two middle samples of an even run), higher
than its neighbours on both sides; the first and last samples are never peaks. A peak's
prominence is its height above the higher of the two lowest points reached, walking left
and right from it, before a higher sample or the end of the curve.

Kept here so that processing a run does not import :mod:`scipy.signal` (and with it
:mod:`scipy.stats`), which took about a third of a second of each ``rundash process``.
"""

from __future__ import annotations

import numpy as np


def peaks_with_prominence(x, min_prominence: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """Indices of the local maxima of the 1-D array ``x`` whose prominence is at least
    ``min_prominence``, in rising order, and those prominences.

    Examples
    --------
    >>> idx, prom = peaks_with_prominence([0.0, 2.0, 1.0, 1.0, 3.0, 3.0, 0.0])
    >>> idx.tolist(), prom.tolist()
    ([1, 4], [1.0, 3.0])
    """
    x = np.asarray(x, dtype=float)
    if x.ndim != 1:
        raise ValueError(f"x: expected a 1-D array, got shape {x.shape}")
    n = x.size
    if n < 3:
        return np.zeros(0, dtype=np.intp), np.zeros(0)
    # runs of equal samples (a NaN is a run of its own and never a peak)
    change = np.flatnonzero(x[1:] != x[:-1])
    starts = np.concatenate(([0], change + 1))
    ends = np.concatenate((change, [n - 1]))
    v = x[starts]
    is_peak = np.zeros(v.size, dtype=bool)
    is_peak[1:-1] = (v[1:-1] > v[:-2]) & (v[1:-1] > v[2:])
    if not is_peak.any():
        return np.zeros(0, dtype=np.intp), np.zeros(0)
    # The walks need only the runs where the curve turns (peaks, troughs), the two ends and
    # the runs beside a NaN: a run the curve passes through monotonically is never the
    # lowest point of a walk, nor the first sample above the peak that is not preceded by
    # a higher turning point.
    keep = np.ones(v.size, dtype=bool)
    keep[1:-1] = ~(((v[:-2] < v[1:-1]) & (v[1:-1] < v[2:]))
                   | ((v[:-2] > v[1:-1]) & (v[1:-1] > v[2:])))
    seq = v[keep].tolist()
    pk = is_peak[keep]
    left = _walk_minima(seq)
    right = _walk_minima(seq[::-1])[::-1]
    top = np.asarray(seq)[pk]
    prom = top - np.maximum(np.asarray(left)[pk], np.asarray(right)[pk])
    k = np.flatnonzero(is_peak)
    idx = (starts[k] + ends[k]) // 2
    ok = prom >= min_prominence
    return idx[ok], prom[ok]


def _walk_minima(seq: list[float]) -> list[float]:
    """For each value, the lowest value met walking left from it (itself included) while
    the values are not higher than it; a NaN ends every walk it meets. One pass with a
    stack of the values still able to end a walk, each with the lowest value of the
    stretch it closes."""
    out = [0.0] * len(seq)
    heights: list[float] = []
    lows: list[float] = []
    for i, vi in enumerate(seq):
        low = vi
        while heights and heights[-1] <= vi:
            heights.pop()
            m = lows.pop()
            if m < low:
                low = m
        out[i] = low
        heights.append(vi)
        lows.append(low)
    return out
