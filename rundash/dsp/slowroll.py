"""Slow-roll compensation of nX vectors.

At low speed, where the rotor's dynamic response is negligible, the probes still see
mechanical and electrical runout of the shaft surface (and any bow). That slow-roll
vector, averaged over a low, steady speed band, is subtracted as a complex vector from
every nX vector of the run (common practice, no source; see :mod:`rundash.conventions`
for the phasor convention).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Protocol

import numpy as np

from rundash.errors import DspError, invalid_value

__all__ = ["auto_slow_roll_window", "choose_slow_roll_window", "SlowRollChoice",
           "slow_roll_vector", "compensate"]

#: Tolerances of a steady slow-roll band: across the band the 1X of every proximity probe
#: changes by at most this fraction in amplitude and this many degrees in phase (our own
#: choice; common practice asks for "steady", no source gives numbers).
SLOW_ROLL_AMPLITUDE_TOL = 0.10
SLOW_ROLL_PHASE_TOL_DEG = 10.0
#: The band must lie below this fraction of the first candidate critical speed (our own
#: choice: there an undamped unbalance response is 0.2^2 / (1 - 0.2^2) = 4.2 % of its
#: level well above the critical, and it changes with speed squared).
SLOW_ROLL_BELOW_CRITICAL = 0.2


@dataclass(frozen=True)
class SlowRollChoice:
    """The slow-roll band chosen from the data, or why none qualified.

    Attributes
    ----------
    window : (low_rpm, high_rpm) or None
    limit_rpm : float
        Highest speed a band could reach (the lower of ``max_fraction`` x the top speed
        and ``below_critical`` x the first candidate critical).
    note : str
        The choice or the refusal, in words.
    """

    window: tuple[float, float] | None
    limit_rpm: float
    note: str


class VectorRows(Protocol):
    """Rows of vectors read one at a time (e.g. from a file, by whoever holds them):
    ``len(rows)`` channels, ``rows[i]`` channel i's vectors."""

    def __len__(self) -> int: ...

    def __getitem__(self, i: int) -> np.ndarray: ...


def is_vector_rows(vectors) -> bool:
    """Whether ``vectors`` is a :class:`VectorRows` (not an array, list or tuple)."""
    return (not isinstance(vectors, (np.ndarray, list, tuple)) and hasattr(vectors, "__len__")
            and hasattr(vectors, "__getitem__"))


def vector_rows(vectors, n: int):
    """``vectors`` as rows of ``n`` complex values: an array (complex as given, 1-D taken
    as one row) or a :class:`VectorRows` (each row read when it is used, not held)."""
    if is_vector_rows(vectors):
        return _CheckedRows(vectors, n)
    v = np.asarray(vectors)
    if not np.iscomplexobj(v):
        v = v.astype(np.complex128)
    v = v[None, :] if v.ndim == 1 else v
    if v.ndim != 2 or v.shape[1] != n:
        raise DspError(invalid_value("vectors", f"shape {np.shape(vectors)}",
                                     f"(n_channels, {n}) like speed_rpm"))
    return v


class _CheckedRows:
    """A :class:`VectorRows` whose rows are checked to hold ``n`` values as they are read."""

    def __init__(self, rows, n: int):
        self._rows, self._n = rows, n

    def __len__(self) -> int:
        return len(self._rows)

    def __getitem__(self, i: int) -> np.ndarray:
        row = np.asarray(self._rows[i]).ravel()
        if row.size != self._n:
            raise DspError(invalid_value(f"vectors row {i}", f"{row.size} values",
                                         f"{self._n} like speed_rpm"))
        return row if np.iscomplexobj(row) else row.astype(np.complex128)

    def __iter__(self):
        return (self[i] for i in range(len(self)))


def choose_slow_roll_window(speed_rpm, vectors, *, first_critical_rpm: float | None = None,
                            max_fraction: float = 0.15, below_critical: float = SLOW_ROLL_BELOW_CRITICAL,
                            width_fraction: float = 0.05, min_speed_rpm: float = 0.0,
                            min_blocks: int = 5, amplitude_tol: float = SLOW_ROLL_AMPLITUDE_TOL,
                            phase_tol_deg: float = SLOW_ROLL_PHASE_TOL_DEG) -> SlowRollChoice:
    """Choose a slow-roll band where the 1X is steady, well below the first critical.

    A band ``width_fraction`` x the top speed wide, or a half, a quarter or an eighth of
    that, qualifies when it lies wholly below ``limit = min(max_fraction x top,
    below_critical x first_critical_rpm)``, holds at least ``min_blocks`` blocks, and the 1X vector of
    every channel is steady across it: a complex least-squares line through the band's
    vectors against speed changes between the band's lowest and highest speeds, less
    twice the standard error of that change (the scatter about the line), by at most
    ``amplitude_tol`` in amplitude and ``phase_tol_deg`` in phase (a vector smaller than
    2 % of the channel's largest 1X has no meaningful phase: then only its change must
    stay within that 2 %). Of the qualifying bands the lowest is taken (the widest of
    those starting there): the dynamic response is least there. A long dwell counts for
    nothing by itself: a warm-up hold at a higher speed is steady because the speed is,
    not because the response is negligible; only the limit keeps it out, so the first
    candidate critical matters.

    Parameters
    ----------
    speed_rpm : array_like, shape (n_blocks,)
    vectors : array_like of complex, shape (n_channels, n_blocks) or (n_blocks,), or VectorRows
        Uncompensated 1X vectors of the channels to be compensated (proximity probes);
        rows given as :class:`VectorRows` are read one at a time.
    first_critical_rpm : float, optional
        Lowest candidate critical speed (e.g. from the uncompensated 1X); None when the
        run shows none.
    max_fraction, below_critical, width_fraction, min_speed_rpm, min_blocks :
        Band limits (fractions of the top speed and of the critical, rpm, count).
    amplitude_tol, phase_tol_deg : float
        Steadiness tolerances.

    Returns
    -------
    SlowRollChoice
    """
    s = np.asarray(speed_rpm, dtype=np.float64).ravel()
    # complex64 input stays so (the whole run's vectors of every channel); the rows are
    # taken to complex128 one at a time, and the band's vectors as a whole
    v = vector_rows(vectors, s.size)
    for name, val in (("max_fraction", max_fraction), ("width_fraction", width_fraction),
                      ("below_critical", below_critical)):
        if not (np.isfinite(val) and 0 < val <= 1):
            raise DspError(invalid_value(name, val, "a fraction in (0, 1]"))
    good = np.isfinite(s)
    for row in v:
        good &= np.isfinite(row)
    if not np.any(good):
        return SlowRollChoice(None, 0.0, "no slow-roll window: no finite speeds")
    top = float(np.max(s[good]))
    limit = max_fraction * top
    why = f"{100 * max_fraction:.0f} % of the top speed {top:.0f} rpm"
    if first_critical_rpm is not None and np.isfinite(first_critical_rpm) and first_critical_rpm > 0 \
            and below_critical * first_critical_rpm < limit:
        limit = below_critical * float(first_critical_rpm)
        why = (f"{100 * below_critical:.0f} % of the first candidate critical at "
               f"{first_critical_rpm:.0f} rpm")
    keep = good & (s <= limit) & (s >= min_speed_rpm)
    width = width_fraction * top
    tol_txt = (f"the 1X steady within {100 * amplitude_tol:.0f} % and {phase_tol_deg:g} deg "
               f"on every proximity probe")
    none = SlowRollChoice(None, limit, (
        f"no slow-roll window qualifies: no band below {limit:.0f} rpm ({why}) holds "
        f"{min_blocks} revolutions with {tol_txt}; proximity vectors are not compensated "
        f"(set [processing] slow_roll_rpm in the machine description, or --slow-roll)"))
    if np.count_nonzero(keep) < min_blocks:
        return none
    order = np.argsort(s[keep], kind="stable")
    c = s[keep][order]
    band, scale = [], []
    for row in v:  # the band's vectors and each channel's largest 1X, one read of each row
        row = np.asarray(row)
        band.append(row[keep])
        scale.append(np.max(np.abs(row[good].astype(np.complex128))))
    vv = np.stack(band)[:, order].astype(np.complex128)
    scale = np.array(scale)
    x = c - c.mean()

    def cum(a):
        return np.concatenate([np.zeros(a.shape[:-1] + (1,), a.dtype), np.cumsum(a, axis=-1)],
                              axis=-1)

    s0, sx, sxx = cum(np.ones_like(x)), cum(x), cum(x * x)
    sv, sxv, svv = cum(vv), cum(vv * x[None, :]), cum(np.abs(vv) ** 2)
    i = np.arange(c.size)
    best = None  # (low_rpm, -width, high_rpm, n)
    for w in (width / 8.0, width / 4.0, width / 2.0, width):
        j = np.searchsorted(c, c + w, side="right")
        n = s0[j] - s0[i]
        for k in np.flatnonzero((n >= min_blocks) & (c + w <= limit)):  # lowest first
            a, b = i[k], j[k]
            if best is not None and c[a] > best[0]:
                break  # a wider band may tie the lowest start, never beat it
            nn = n[k]
            mx = (sx[b] - sx[a]) / nn
            var = max((sxx[b] - sxx[a]) / nn - mx * mx, 0.0)
            mean = (sv[:, b] - sv[:, a]) / nn
            slope = ((sxv[:, b] - sxv[:, a]) / nn - mx * mean) / var if var > 0 \
                else np.zeros_like(mean)
            # the line's ends at the band's lowest and highest speeds, less twice the
            # standard error of its change (the scatter of the band's vectors about it)
            x0, x1 = c[a] - c.mean() - mx, c[b - 1] - c.mean() - mx
            lo_v, hi_v = mean + slope * x0, mean + slope * x1
            res = max(float(np.max((svv[:, b] - svv[:, a]) / nn - np.abs(mean) ** 2
                                   - np.abs(slope) ** 2 * var)), 0.0)
            se = math.sqrt(res / max(nn - 2, 1) / var) * (x1 - x0) if var > 0 else 0.0
            change = np.maximum(np.abs(hi_v - lo_v) - 2.0 * se, 0.0)
            small = np.abs(mean) < 0.02 * scale
            ref = np.maximum(np.abs(mean), 1e-300)
            amp_ok = np.maximum(np.abs(np.abs(hi_v) - np.abs(lo_v)) - 2.0 * se, 0.0) \
                <= amplitude_tol * ref
            ph_ok = np.degrees(2.0 * np.arcsin(np.minimum(change / (2.0 * ref), 1.0))) \
                <= phase_tol_deg
            tiny_ok = change <= 0.02 * scale
            if np.all(np.where(small, tiny_ok, amp_ok & ph_ok)):
                cand = (float(c[a]), -w, float(c[a] + w), int(nn))
                if best is None or cand[:2] < best[:2]:
                    best = cand
                break
    if best is None:
        return none
    lo, _, hi, nn = best
    return SlowRollChoice((lo, hi), limit, (
        f"slow-roll window {lo:.0f}-{hi:.0f} rpm chosen from the data: the lowest band of "
        f"{nn} revolutions with {tol_txt}, below {limit:.0f} rpm ({why})"))


def auto_slow_roll_window(speed_rpm, time_s, *, max_fraction: float = 0.15,
                          width_fraction: float = 0.05, min_speed_rpm: float = 0.0,
                          max_accel_rpm_s: float | None = None,
                          min_blocks: int = 5) -> tuple[float, float] | None:
    """Choose a slow-roll speed band from the speeds alone (no vectors at hand).

    :func:`choose_slow_roll_window` is the rule processing uses: it checks that the 1X
    is steady and that the band lies well below the first critical. Without vectors
    only this cruder rule is possible.

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
    if not np.any(counts >= min_blocks):
        return None  # enough low blocks, but spread wider than any one band
    # the lowest band within 5 % of the longest dwell (a sweep at constant deceleration
    # spends equal time in every band: then the lowest, where the response is least)
    best = int(np.flatnonzero(spent >= 0.95 * spent.max())[0])
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
