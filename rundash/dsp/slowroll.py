"""Slow-roll compensation of nX vectors.

At low speed, where the rotor's dynamic response is negligible, the probes still see
mechanical and electrical runout of the shaft surface (and any bow). That slow-roll
vector, averaged over a low, steady speed band, is subtracted as a complex vector from
every nX vector of the run (common practice, no source; see :mod:`rundash.conventions`
for the phasor convention).
"""

from __future__ import annotations

import numpy as np

from rundash.errors import DspError, invalid_value

__all__ = ["auto_slow_roll_window", "slow_roll_vector", "compensate"]


def auto_slow_roll_window(speed_rpm, time_s, *, max_fraction: float = 0.15,
                          width_fraction: float = 0.05, min_speed_rpm: float = 0.0,
                          max_accel_rpm_s: float | None = None,
                          min_blocks: int = 5) -> tuple[float, float] | None:
    """Choose a slow-roll speed band automatically.

    Rule (common practice, no source): consider the blocks below ``max_fraction`` of the
    record's top speed and above ``min_speed_rpm`` (and, if given, with |acceleration|
    at most ``max_accel_rpm_s``). Slide a band ``width_fraction`` x top speed wide over
    their speeds and keep the band where the machine spent the most time (the sum of its
    blocks' durations, each in proportion to 1/speed: the speed dwelled there, so it is
    the steadiest; counting blocks alone would favour the top of a sweep); of the bands
    within 5 % of the longest dwell, the lowest. Return ``None`` when no band holds
    ``min_blocks`` blocks. The user should confirm the band is well below the first
    critical speed.

    Parameters
    ----------
    speed_rpm : array_like, shape (n_blocks,)
        Block speeds in rpm (e.g. :attr:`OrderTrack.speed_rpm`).
    time_s : array_like, shape (n_blocks,)
        Block times in s.
    max_fraction, width_fraction : float
        Upper limit and width of the band as fractions of the top speed.
    min_speed_rpm : float
        Lowest speed considered (the tach may be unreliable near standstill).
    max_accel_rpm_s : float, optional
        Largest |acceleration| of a block considered.
    min_blocks : int
        Fewest blocks in an acceptable band.

    Returns
    -------
    (low_rpm, high_rpm) or None
    """
    s = np.asarray(speed_rpm, dtype=np.float64).ravel()
    t = np.asarray(time_s, dtype=np.float64).ravel()
    if s.shape != t.shape:
        raise DspError(invalid_value("time_s", f"shape {t.shape}", f"shape {s.shape} like speed_rpm"))
    for name, v in (("max_fraction", max_fraction), ("width_fraction", width_fraction)):
        if not (np.isfinite(v) and 0 < v <= 1):
            raise DspError(invalid_value(name, v, "a fraction in (0, 1]"))
    if s.size == 0 or not np.any(np.isfinite(s)):
        return None
    top = float(np.nanmax(s))
    keep = np.isfinite(s) & (s <= max_fraction * top) & (s >= min_speed_rpm)
    if max_accel_rpm_s is not None and s.size > 2:
        acc = np.gradient(s, t)
        keep &= np.abs(acc) <= max_accel_rpm_s
    cand = np.sort(s[keep])
    if cand.size < min_blocks:
        return None
    width = width_fraction * top
    hi_idx = np.searchsorted(cand, cand + width, side="right")
    counts = hi_idx - np.arange(cand.size)
    # time spent in each band: a block of whole revolutions lasts in proportion to
    # 1/speed, so counting blocks alone would favour the higher speeds of a sweep
    dur = 1.0 / np.maximum(cand, 1e-9)
    cum = np.concatenate([[0.0], np.cumsum(dur)])
    spent = np.where(counts >= min_blocks, cum[hi_idx] - cum[np.arange(cand.size)], -1.0)
    # the lowest band within 5 % of the longest dwell (a sweep at constant deceleration
    # spends equal time in every band: then the lowest, where the response is least)
    best = int(np.flatnonzero(spent >= 0.95 * spent.max())[0])
    if counts[best] < min_blocks:
        return None
    lo = float(cand[best])
    return lo, float(min(lo + width, max_fraction * top))


def slow_roll_vector(speed_rpm, vectors, window: tuple[float, float]) -> np.ndarray:
    """Mean complex vector over the blocks whose speed lies in ``window`` (rpm, inclusive).

    Parameters
    ----------
    speed_rpm : array_like, shape (n_blocks,)
    vectors : array_like of complex, shape (..., n_blocks)
        E.g. :attr:`OrderTrack.vectors`, shape (n_channels, n_orders, n_blocks).
    window : (low_rpm, high_rpm)

    Returns
    -------
    ndarray of complex, shape (...)
        Slow-roll vector per channel and order.
    """
    s = np.asarray(speed_rpm, dtype=np.float64).ravel()
    v = np.asarray(vectors)
    if v.shape[-1:] != s.shape:
        raise DspError(invalid_value("vectors", f"shape {v.shape}", f"last axis of {s.size} blocks"))
    lo, hi = (float(w) for w in window)
    if not (np.isfinite(lo) and np.isfinite(hi) and lo <= hi):
        raise DspError(invalid_value("window", window, "(low_rpm, high_rpm) with low <= high"))
    sel = (s >= lo) & (s <= hi)
    if not np.any(sel):
        raise DspError(f"No block in the slow-roll window {lo:.0f}-{hi:.0f} rpm")
    return v[..., sel].mean(axis=-1)


def compensate(vectors, sr) -> np.ndarray:
    """Subtract a slow-roll vector ``sr`` (shape ``vectors.shape[:-1]``) from every block."""
    v = np.asarray(vectors)
    sr = np.asarray(sr)
    if sr.shape != v.shape[:-1]:
        raise DspError(invalid_value("sr", f"shape {sr.shape}", f"shape {v.shape[:-1]}"))
    return v - sr[..., None]
