"""Once-per-rev reference: edge detection on a tach channel and pulse repair.

Conventions (edge, threshold, hysteresis, pulses per revolution) are those of
:mod:`rundash.conventions`.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from typing import Literal

import numpy as np

from rundash.errors import TachError, TachQualityWarning, invalid_value

__all__ = ["detect_edges", "once_per_rev", "OncePerRev", "MIN_REVOLUTIONS"]

#: Fewest once-per-rev events that make a usable reference (4 revolutions).
MIN_REVOLUTIONS = 4

# Tolerance of the anchor search: four consecutive intervals, each within 15 % of the
# one predicted from the two before it, are trusted as a starting point of the repair
# (common practice, no source).
_ANCHOR_TOL = 0.15


def _block_levels(x: np.ndarray, block: int, q_lo: float, q_hi: float):
    """Low and high levels per block (robust percentiles), at block centres (samples)."""
    n = x.size
    n_blocks = max(1, n // block)
    edges = np.linspace(0, n, n_blocks + 1).astype(np.int64)
    lo = np.empty(n_blocks)
    hi = np.empty(n_blocks)
    if n % n_blocks == 0:
        view = x.reshape(n_blocks, -1)
        lo[:], hi[:] = np.percentile(view, [q_lo, q_hi], axis=1)
    else:
        for b in range(n_blocks):  # one call per block, not per sample
            lo[b], hi[b] = np.percentile(x[edges[b]:edges[b + 1]], [q_lo, q_hi])
    centres = 0.5 * (edges[:-1] + edges[1:])
    span = hi - lo
    # A block without a pulse (very low speed) shows almost no span: take its levels
    # from the neighbours that saw pulses.
    good = span > 0.25 * np.max(span)
    if not np.all(good) and np.any(good):
        lo = np.interp(centres, centres[good], lo[good])
        hi = np.interp(centres, centres[good], hi[good])
    if n_blocks >= 2:
        # carry the drift on to the record's ends (linear, from the two end windows)
        def ends(v):
            first = v[0] - (v[1] - v[0]) * (centres[0] - 0.0) / (centres[1] - centres[0])
            last = v[-1] + (v[-1] - v[-2]) * (n - 1 - centres[-1]) / (centres[-1] - centres[-2])
            return np.concatenate([[first], v, [last]])

        lo, hi = ends(lo), ends(hi)
        centres = np.concatenate([[0.0], centres, [n - 1.0]])
    return centres, lo, hi


def detect_edges(
    x,
    fs: float,
    *,
    edge: Literal["rising", "falling"] = "rising",
    threshold: float | None = None,
    hysteresis: float | None = None,
    t0: float = 0.0,
    level_window_s: float = 2.0,
) -> np.ndarray:
    """Event times of the chosen edge of a tach channel.

    Parameters
    ----------
    x : array_like, shape (n_samples,)
        Tach channel (any units, float32 or float64). The whole channel may be given
        (tens of millions of samples); the work is vectorised.
    fs : float
        Sample rate in Hz.
    edge : {'rising', 'falling'}
        Which edge is the reference event (see :mod:`rundash.conventions`).
    threshold : float, optional
        Fixed threshold in the units of ``x``. By default the threshold follows the
        midpoint of the low and high levels, estimated per window of
        ``level_window_s`` from the 2nd and 98th percentiles and interpolated between
        windows, so a slow DC drift of a proximity-probe tach over a notch or keyway
        does not move the events.
    hysteresis : float, optional
        Full width of the hysteresis band in the units of ``x``, centred on the
        threshold. Default: 20 % of the local span (high - low level).
    t0 : float
        Time in s of sample 0 of ``x``.
    level_window_s : float
        Window in s for the level estimate; it should hold at least one pulse at the
        lowest speed of interest. Windows without a pulse take their neighbours' levels.

    Returns
    -------
    ndarray of float64, shape (n_events,)
        Event times in s, located to sub-sample precision by linear interpolation of
        the two samples that straddle the threshold.

    Examples
    --------
    >>> import numpy as np
    >>> fs = 1000.0
    >>> t = np.arange(2000) / fs                  # 10 Hz pulses, edges 4 ms long
    >>> x = np.clip(2.5 + 2.5 * (0.025 - np.abs(np.mod(t, 0.1) - 0.05)) / 0.002, 0.0, 5.0)
    >>> np.round(detect_edges(x, fs)[:3], 6)
    array([0.025, 0.125, 0.225])
    """
    x = np.asarray(x)
    if x.ndim != 1:
        raise TachError(invalid_value("x", f"array of shape {x.shape}", "a 1-D tach channel"))
    if not x.dtype.kind == "f":
        x = x.astype(np.float64)
    if not (np.isfinite(fs) and fs > 0):
        raise TachError(invalid_value("fs", fs, "a positive sample rate in Hz"))
    if edge not in ("rising", "falling"):
        raise TachError(invalid_value("edge", edge, "'rising' or 'falling'"))
    if hysteresis is not None and not (np.isfinite(hysteresis) and hysteresis >= 0):
        raise TachError(invalid_value("hysteresis", hysteresis, "a non-negative level"))
    if not (np.isfinite(level_window_s) and level_window_s > 0):
        raise TachError(invalid_value("level_window_s", level_window_s, "a positive time in s"))
    if x.size < 3:
        return np.empty(0)
    if not np.all(np.isfinite(x)):
        raise TachError(invalid_value("x", "a channel with NaN or inf", "finite samples"))
    if edge == "falling":
        x = -x
        threshold = None if threshold is None else -threshold

    block = max(64, int(round(level_window_s * fs)))
    if threshold is None:
        centres, lo, hi = _block_levels(x, block, 2.0, 98.0)
        if lo.size == 1:
            mid = np.full(1, 0.5 * (lo[0] + hi[0]))
            span = np.full(1, hi[0] - lo[0])
            thr = mid[0]
        else:
            mid = 0.5 * (lo + hi)
            span = hi - lo
            thr = np.interp(np.arange(x.size), centres, mid).astype(x.dtype, copy=False)
        if np.max(span) <= 0:
            return np.empty(0)
        if hysteresis is None:
            half = (0.1 * np.interp(np.arange(x.size), centres, span)
                    if span.size > 1 else 0.1 * span[0])
        else:
            half = 0.5 * hysteresis
    else:
        thr = float(threshold)
        half = 0.5 * float(hysteresis) if hysteresis is not None else None
        if half is None:
            lo_g, hi_g = np.percentile(x, [2.0, 98.0])
            half = 0.1 * (hi_g - lo_g)

    # Hysteresis state: +1 above the upper level, -1 below the lower, 0 in between.
    state = (x > thr + half).astype(np.int8)
    state -= (x < thr - half)
    definite = np.flatnonzero(state)
    if definite.size < 2:
        return np.empty(0)
    s = state[definite]
    del state
    change = np.flatnonzero((s[1:] == 1) & (s[:-1] == -1))
    i_low = definite[change]  # last sample surely low before the rise
    i_high = definite[change + 1]  # first sample surely high
    # Crossings of the threshold itself; per edge keep the last one before i_high.
    above = x >= thr
    cross = np.flatnonzero(above[1:] & ~above[:-1])  # between cross and cross + 1
    del above
    j = np.searchsorted(cross, i_high, side="left") - 1
    ok = j >= 0
    j = j[ok]
    c = cross[j]
    ok2 = c >= i_low[ok]
    c = c[ok2]
    x0 = x[c].astype(np.float64)
    x1 = x[c + 1].astype(np.float64)
    thr_c = thr[c].astype(np.float64) if np.ndim(thr) else thr
    frac = (thr_c - x0) / (x1 - x0)
    return t0 + (c + frac) / fs


@dataclass(frozen=True)
class OncePerRev:
    """The once-per-rev reference after pulse repair.

    Attributes
    ----------
    times_s : ndarray, shape (n_revs + 1,)
        Once-per-rev reference event times in s (see :mod:`rundash.conventions`).
    pulses_per_rev : int
        Pulses per revolution of the tach channel.
    n_missing_filled : int
        Pulses inserted where the tach missed some.
    n_extra_removed : int
        Spurious pulses removed.
    repair_times_s : ndarray
        Times in s of the inserted and removed pulses.
    notes : tuple of str
        What was done, in words.
    """

    times_s: np.ndarray
    pulses_per_rev: int
    n_missing_filled: int
    n_extra_removed: int
    repair_times_s: np.ndarray
    notes: tuple[str, ...]

    @property
    def n_revs(self) -> int:
        """Whole revolutions between the first and the last event."""
        return int(self.times_s.size - 1)


def _predict(d1: float, d2: float) -> float:
    """Next pulse interval from the last two (d2 the most recent).

    Uses a constant angular acceleration: the squared pulse rate is linear in angle, so
    1/d^2 is extrapolated linearly (exact for a constant run-up or coast-down rate, and
    good from the first revolutions of a hard start, unlike a median).
    """
    q = 2.0 / (d2 * d2) - 1.0 / (d1 * d1)
    if q <= 0.25 / (d2 * d2):
        return 2.0 * d2
    return 1.0 / math.sqrt(q)


_MAX_FILL = 8  # most pulses inserted in one gap; a longer gap is a dropout, left as is


def _repair_forward(t: np.ndarray, a: int, filled: list, removed: list, notes: list,
                    sign: float = 1.0) -> list:
    """Walk forward from 3 trusted intervals ending at t[a + 3].

    Each next event is judged against the predicted pulse times under three hypotheses:
    it is the next pulse, k - 1 pulses are missing before it (it fits the k-th
    predicted pulse), or it is spurious (without it, the event after it fits a
    predicted pulse); an event that fits a pulse within 5 % is kept, another is removed
    when dropping it fits at least twice as well. When none fits, the walk starts again from the next
    four consistent intervals and the events in between are kept as they are.
    ``sign`` = -1 marks a backward walk on negated, reversed times (for the notes).
    """
    out = [float(v) for v in t[a:a + 4]]
    i = a + 4
    n = t.size
    while i < n:
        d_pred = _predict(out[-2] - out[-3], out[-1] - out[-2])
        r = (t[i] - out[-1]) / d_pred
        dev_next = abs(r - 1.0)
        if dev_next < 0.1:
            out.append(float(t[i]))
            i += 1
            continue
        # cumulative predicted times of the next 1 .. _MAX_FILL + 1 pulses
        steps = []
        da, db = out[-2] - out[-3], out[-1] - out[-2]
        for _ in range(_MAX_FILL + 1):
            dn = _predict(da, db)
            steps.append(dn)
            da, db = db, dn
        cum = np.cumsum(steps)
        dev_spurious = np.inf
        if i + 1 < n:  # without t[i], the event after it is the next or a later pulse
            dev_spurious = float(np.min(np.abs((t[i + 1] - out[-1]) / cum - 1.0)))
        gap = t[i] - out[-1]
        k = int(np.argmin(np.abs(gap / cum - 1.0))) + 1  # t[i] is the k-th next pulse
        dev_missing = abs(gap / cum[k - 1] - 1.0) if k >= 2 else np.inf
        keep = min(dev_next, dev_missing)
        # an event that fits as a pulse (within 5 %) is kept; otherwise it is dropped
        # when dropping it fits clearly better
        if keep > 0.05 and dev_spurious < 0.5 * keep and (dev_spurious < 0.2 or r < 0.5):
            removed.append(float(t[i]))
            i += 1
            continue
        if dev_missing <= dev_next and dev_missing < 0.2:
            # k - 1 pulses missing: place them by the same model, scaled to fit.
            new = [out[-1] + float(c) * gap / float(cum[k - 1]) for c in cum[:k - 1]]
            filled.extend(new)
            out.extend(new)
            out.append(float(t[i]))
            i += 1
            continue
        if dev_next < 0.33:
            out.append(float(t[i]))  # a real, if abrupt, change of speed
            i += 1
            continue
        # nothing fits (a dropout or a burst of noise): restart from a fresh anchor
        try:
            a2 = i + _find_anchor(t[i:])
        except TachError:
            out.extend(float(v) for v in t[i:])
            notes.append(f"tach irregular from t = {sign * t[i]:.4f} s to the "
                         f"{'end' if sign > 0 else 'start'}, kept unrepaired")
            break
        lo, hi = sorted((sign * t[i], sign * t[a2]))
        notes.append(f"tach irregular between t = {lo:.4f} s and {hi:.4f} s, kept unrepaired")
        out.extend(float(v) for v in t[i:a2 + 4])
        i = a2 + 4
    return out


def _find_anchor(t: np.ndarray) -> int:
    """First index a where intervals a..a+3 agree with the prediction from the two
    before each (within _ANCHOR_TOL)."""
    d = np.diff(t)
    for a in range(d.size - 3):
        if (abs(d[a + 2] / _predict(d[a], d[a + 1]) - 1.0) < _ANCHOR_TOL
                and abs(d[a + 3] / _predict(d[a + 1], d[a + 2]) - 1.0) < _ANCHOR_TOL):
            return a
    raise TachError(
        "Tach pulses too irregular: no four consecutive intervals agree; "
        "check the edge, threshold and pulses_per_rev of the tach channel")


def once_per_rev(event_times_s, pulses_per_rev: int = 1, *, repair: bool = True) -> OncePerRev:
    """Once-per-rev reference events from detected tach events, with pulse repair.

    Parameters
    ----------
    event_times_s : array_like, shape (n_events,)
        Tach event times in s, increasing (e.g. from :func:`detect_edges`).
    pulses_per_rev : int
        Evenly spaced pulses per revolution (N >= 1). Every N-th event, starting with the
        first, is kept as the once-per-rev event; a missing-tooth marker is not decoded.
    repair : bool
        Detect and repair missing and extra pulses. Each interval is compared with the
        one predicted from the two before it, assuming locally constant angular
        acceleration (the squared pulse rate is extrapolated linearly in angle), so the
        repair keeps working under hard acceleration at low speed. An interval close to
        k times the prediction (k >= 2) gets k - 1 pulses inserted; a pulse that comes
        too early and whose removal makes the next one fit is removed. The walk starts
        from the first three consistent intervals and goes backwards from there too.

    Returns
    -------
    OncePerRev

    Warns
    -----
    TachQualityWarning
        When pulses were inserted or removed, or a stretch fitted no hypothesis (it is
        then kept unrepaired and named in ``notes``). At most 8 pulses are inserted in
        one gap; a longer gap is taken as a dropout.

    Raises
    ------
    TachError
        With fewer than 4 revolutions of events, or events that are not increasing.
    """
    t = np.asarray(event_times_s, dtype=np.float64).ravel()
    if isinstance(pulses_per_rev, bool) or int(pulses_per_rev) != pulses_per_rev or pulses_per_rev < 1:
        raise TachError(invalid_value("pulses_per_rev", pulses_per_rev, "an integer >= 1"))
    ppr = int(pulses_per_rev)
    need = MIN_REVOLUTIONS * ppr + 1
    if t.size < need:
        raise TachError(
            f"Too few tach pulses: {t.size} events with pulses_per_rev={ppr} make fewer "
            f"than {MIN_REVOLUTIONS} revolutions (need at least {need} events); check the "
            "tach channel, its threshold and the edge")
    if not np.all(np.isfinite(t)) or np.any(np.diff(t) <= 0):
        raise TachError(invalid_value("event_times_s", "non-increasing or non-finite times",
                                      "strictly increasing finite times in s"))
    notes: list[str] = []
    filled: list[float] = []
    removed: list[float] = []
    if repair:
        a = _find_anchor(t)
        fwd = _repair_forward(t, a, filled, removed, notes)  # from a trusted anchor on
        if a > 0:
            back = _repair_forward(-t[: a + 4][::-1], 0,  # and back to the start
                                   filled_b := [], removed_b := [], notes_b := [], -1.0)
            notes.extend(notes_b)
            filled.extend(-v for v in filled_b)
            removed.extend(-v for v in removed_b)
            pulses = np.concatenate([-np.asarray(back[::-1])[:-4], np.asarray(fwd)])
        else:
            pulses = np.asarray(fwd)
        if filled:
            notes.append(f"{len(filled)} missing tach pulse(s) inserted")
        if removed:
            notes.append(f"{len(removed)} spurious tach pulse(s) removed")
    else:
        pulses = t
    times = pulses[::ppr].copy()
    if times.size < MIN_REVOLUTIONS + 1:
        raise TachError(
            f"Too few tach pulses after repair: {times.size} once-per-rev events make fewer "
            f"than {MIN_REVOLUTIONS} revolutions")
    rep = np.sort(np.asarray(filled + removed, dtype=np.float64))
    if rep.size or notes:
        where = f" (first repair at t = {rep[0]:.4f} s)" if rep.size else ""
        warnings.warn("; ".join(notes) + where, TachQualityWarning, stacklevel=2)
    return OncePerRev(times_s=times, pulses_per_rev=ppr, n_missing_filled=len(filled),
                      n_extra_removed=len(removed), repair_times_s=rep, notes=tuple(notes))
