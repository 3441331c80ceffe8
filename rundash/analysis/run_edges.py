"""Readings at the edges of a run: a 1X response still climbing at the top speed
(:func:`rising_at_top`: a critical may lie above it) and the lowest candidate critical of
the uncompensated 1X (:func:`first_candidate_rpm`, where slow roll must stay below)."""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from rundash.analysis.criticals import find_criticals
from rundash.dsp.slowroll import is_vector_rows
from rundash.errors import AnalysisError, invalid_value

__all__ = ["RisingAtTop", "rising_at_top", "first_candidate_rpm"]


@dataclass(frozen=True)
class RisingAtTop:
    """The 1X response still climbs at the top of a run's speed range.

    A critical may lie above the highest speed reached; it cannot be located or judged
    from this run. ``rise_pct`` is the amplitude rise over ``from_rpm``..``to_rpm``;
    ``lag_change_deg`` the lag change over the same span (rising lag points to a
    resonance ahead; common practice, no source).
    """

    from_rpm: float
    to_rpm: float
    amplitude_from: float
    amplitude_to: float
    rise_pct: float
    lag_change_deg: float
    note: str


def rising_at_top(speed_rpm, vector, *, amplitude_factor: float = 2.0,
                  top_fraction: float = 0.1, min_rise: float = 0.25,
                  min_points: int = 10) -> RisingAtTop | None:
    """Say whether the 1X amplitude still rises at the top speed of a run.

    Compares the mean amplitude in the lowest and highest ``top_fraction / 4`` of the top
    ``top_fraction`` of the speed range; a rise of at least ``min_rise`` (relative) with an
    amplitude that grows across the span (more than two thirds of the bins above the
    first) gives a :class:`RisingAtTop`, else None.

    Parameters
    ----------
    speed_rpm : array_like, shape (n,)
    vector : array_like of complex, shape (n,)
        1X phasors (:mod:`rundash.conventions`), slow-roll compensated.
    amplitude_factor : float
        Amplitude reported = ``amplitude_factor * |vector|`` (2 for p-p).
    top_fraction : float
        Part of the speed range (from the top) examined, 0 < top_fraction < 1.
    min_rise : float
        Relative rise that counts.
    min_points : int
        Fewer points than this in the span: None.

    Examples
    --------
    >>> import numpy as np
    >>> from rundash.analysis.amplification import unbalance_response
    >>> s = np.linspace(1000, 3000, 2000)
    >>> v = unbalance_response(s, 3300.0, 0.05)   # a critical at 3300 rpm, above the top
    >>> rising_at_top(s, v) is not None
    True
    >>> rising_at_top(s, np.full(s.size, 1.0 + 0j)) is None
    True
    """
    s = np.asarray(speed_rpm, dtype=float).ravel()
    v = np.asarray(vector, dtype=complex).ravel()
    if s.shape != v.shape:
        raise AnalysisError(invalid_value("vector", f"shape {v.shape}", f"the shape of speed_rpm {s.shape}"))
    if not 0 < top_fraction < 1:
        raise AnalysisError(invalid_value("top_fraction", top_fraction, "a fraction between 0 and 1"))
    ok = np.isfinite(s) & np.isfinite(v)
    s, v = s[ok], v[ok]
    if s.size < min_points:
        return None
    top = float(s.max())
    lo = top - top_fraction * (top - float(s.min()))
    sel = s >= lo
    if sel.sum() < min_points:
        return None
    ss, vv = s[sel], v[sel]
    order = np.argsort(ss)
    ss, vv = ss[order], vv[order]
    edges = np.linspace(lo, top, 9)
    idx = np.clip(np.searchsorted(edges, ss, side="right") - 1, 0, 7)
    amp = amplitude_factor * np.abs(vv)
    bins = np.array([amp[idx == k].mean() if np.any(idx == k) else np.nan for k in range(8)])
    first, last = bins[0], np.nanmean(bins[-2:])
    if not (np.isfinite(first) and np.isfinite(last)) or first <= 0:
        return None
    rise = last / first - 1.0
    growing = np.nanmean(bins[1:] > first) > 2 / 3
    if rise < min_rise or not growing:
        return None
    lag = np.degrees(np.unwrap(-np.angle(vv)))
    k = max(1, lag.size // 8)
    dlag = float(np.mean(lag[-k:]) - np.mean(lag[:k]))
    note = (f"the 1X amplitude still rises at the top of the run: +{100 * rise:.0f} % from "
            f"{lo:.0f} to {top:.0f} rpm (lag change {dlag:+.0f} deg); a critical may lie above "
            f"{top:.0f} rpm and cannot be located or judged from this run")
    return RisingAtTop(lo, top, float(first), float(last), 100 * rise, dlag, note)


def first_candidate_rpm(speed_rpm, vectors, *, amplitude_factor: float = 2.0) -> float | None:
    """Lowest confirmed critical speed in uncompensated 1X vectors, for choosing where
    slow roll may be read (:func:`rundash.dsp.slowroll.choose_slow_roll_window`).

    Runout adds a constant vector, which shifts neither a resonance's amplitude peak much
    nor its phase rise; only peaks the phase confirms count, so a runout or noise bump
    at low speed cannot push the slow-roll band down. No modal fit (a candidate only).

    Parameters
    ----------
    speed_rpm : array_like, shape (n,)
    vectors : array_like of complex, shape (n_channels, n) or (n,), or
        :class:`rundash.dsp.slowroll.VectorRows` (read a row at a time)

    Returns
    -------
    float or None
        None when no channel shows a confirmed critical (or the data are too few).
    """
    s = np.asarray(speed_rpm, dtype=float).ravel()
    if is_vector_rows(vectors):  # read a row at a time
        v = (vectors[i] for i in range(len(vectors)))
    else:
        v = np.asarray(vectors)  # rows taken to complex one at a time (the whole run's)
        v = v[None, :] if v.ndim == 1 else v
    best = None
    for row in v:
        row = np.asarray(row, dtype=complex)
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                found = find_criticals(s, row, amplitude_factor=amplitude_factor, fit=False)
        except AnalysisError:
            continue
        for c in found:
            if c.classification == "confirmed" and (best is None or c.speed_rpm < best):
                best = float(c.speed_rpm)
    return best
