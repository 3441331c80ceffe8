"""Vectors of a track near one speed: the one definition the findings (mode-shape hints)
and the comparison (lag and 1X at chosen speeds) read a track's vector at a speed by."""

from __future__ import annotations

import numpy as np


def mean_vector_near(speed_rpm, vector, at_rpm: float, *, width_pct: float = 0.5,
                     nearest_within_pct: float | None = None) -> tuple[complex | None, int]:
    """Mean complex vector of the blocks within ``±width_pct`` % of ``at_rpm``.

    With no block there, the nearest block when it lies within ``nearest_within_pct`` %
    (None: no fallback). Returns ``(vector or None, blocks averaged)``.

    >>> s = np.array([990.0, 1000.0, 1004.0, 1100.0])
    >>> v = np.array([1 + 0j, 2 + 0j, 4 + 0j, 8 + 0j])
    >>> mean_vector_near(s, v, 1000.0), mean_vector_near(s, v, 1090.0, nearest_within_pct=2)
    (((3+0j), 2), ((8+0j), 1))
    """
    s = np.asarray(speed_rpm, dtype=float)
    v = np.asarray(vector)
    sel = np.abs(s - at_rpm) <= at_rpm * width_pct / 100.0
    if sel.any():
        return complex(v[sel].mean()), int(sel.sum())
    if nearest_within_pct is None or s.size == 0:
        return None, 0
    i = int(np.argmin(np.abs(s - at_rpm)))
    if abs(s[i] - at_rpm) > at_rpm * nearest_within_pct / 100.0:
        return None, 0
    return complex(v[i]), 1
