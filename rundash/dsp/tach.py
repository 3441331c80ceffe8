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

__all__ = ["detect_edges", "EdgeDetector", "once_per_rev", "OncePerRev", "MIN_REVOLUTIONS",
           "edge_samples", "edge_spans", "timing_jitter", "TachQuality", "tach_quality"]

#: Fewest once-per-rev events that make a usable reference (4 revolutions).
MIN_REVOLUTIONS = 4

# Tolerance of the anchor search: four consecutive intervals, each within 15 % of the
# one predicted from the two before it, are trusted as a starting point of the repair
# (common practice, no source).
_ANCHOR_TOL = 0.15

# Percentiles of the low and high tach levels: a narrow notch (6 deg of a revolution is
# 1.7 % of the samples) sets the level only below the 1.7th percentile (common
# practice, no source).
_Q_LO, _Q_HI = 0.25, 99.75



def _block_bounds(n: int, block: int) -> np.ndarray:
    """Sample bounds of the level windows: ``n // block`` (at least 1) near-equal blocks."""
    n_blocks = max(1, n // block)
    return np.linspace(0, n, n_blocks + 1).astype(np.int64)


def _finish_levels(bounds: np.ndarray, lo: np.ndarray, hi: np.ndarray, n: int):
    """Per-block low and high levels -> (centres, lo, hi): blocks without a pulse take
    their neighbours' levels, and the drift is carried on to the record's ends."""
    centres = 0.5 * (bounds[:-1] + bounds[1:])
    span = hi - lo
    # A block without a pulse (very low speed) shows almost no span: take its levels
    # from the neighbours that saw pulses.
    good = span > 0.25 * np.max(span)
    if not np.all(good) and np.any(good):
        lo = np.interp(centres, centres[good], lo[good])
        hi = np.interp(centres, centres[good], hi[good])
    if lo.size >= 2:
        # carry the drift on to the record's ends (linear, from the two end windows)
        def ends(v):
            first = v[0] - (v[1] - v[0]) * (centres[0] - 0.0) / (centres[1] - centres[0])
            last = v[-1] + (v[-1] - v[-2]) * (n - 1 - centres[-1]) / (centres[-1] - centres[-2])
            return np.concatenate([[first], v, [last]])

        lo, hi = ends(lo), ends(hi)
        centres = np.concatenate([[0.0], centres, [n - 1.0]])
    return centres, lo, hi


class _ExactQuantiles:
    """Exact linear-interpolation percentiles of a stream (as ``np.percentile``), in
    bounded memory: the order statistics are found by a radix select on the samples'
    order-preserving integer keys, 16 bits per pass over the stream (2 passes for
    float32, 4 for float64), with one 65 536-bin histogram per wanted rank."""

    def __init__(self, n: int, qs, dtype):
        self.dtype = np.dtype(dtype)
        self.bits = 8 * self.dtype.itemsize
        self.utype = np.uint32 if self.bits == 32 else np.uint64
        v = np.asarray(qs, dtype=np.float64) / 100.0 * (n - 1)
        self.lo_rank = np.floor(v).astype(np.int64)
        self.frac = v - self.lo_rank
        ranks = np.unique(np.concatenate([self.lo_rank, np.minimum(self.lo_rank + 1, n - 1)]))
        self.ranks = ranks  # rank r: the (r + 1)-th smallest
        self.prefix = np.zeros(ranks.size, np.uint64)  # known high bits of each key
        self.below = ranks.copy()  # rank within the keys sharing the prefix
        self.shift = self.bits  # bits still unknown
        self._hist = None

    @property
    def done(self) -> bool:
        return self.shift == 0

    def _keys(self, x: np.ndarray) -> np.ndarray:
        u = np.ascontiguousarray(x, dtype=self.dtype).view(self.utype)
        top = self.utype(1 << (self.bits - 1))
        return np.where(u & top, ~u, u | top)

    def feed(self, x: np.ndarray) -> None:
        keys = self._keys(x)
        s = self.shift - 16
        if self._hist is None:
            self._hist = np.zeros((self.ranks.size, 1 << 16), np.int64)
        digit = ((keys >> self.utype(s)) & self.utype(0xFFFF)).astype(np.int64)
        if self.shift == self.bits:  # first pass: every key shares the empty prefix
            h = np.bincount(digit, minlength=1 << 16)
            self._hist += h
            return
        high = keys >> self.utype(self.shift)
        for i, p in enumerate(self.prefix):
            sel = high == self.utype(p)
            self._hist[i] += np.bincount(digit[sel], minlength=1 << 16)

    def end_pass(self) -> None:
        for i in range(self.ranks.size):
            c = np.cumsum(self._hist[i])
            d = int(np.searchsorted(c, self.below[i], side="right"))
            self.below[i] -= c[d - 1] if d else 0
            self.prefix[i] = (int(self.prefix[i]) << 16) | d
        self.shift -= 16
        self._hist = None

    def values(self) -> np.ndarray:
        """The percentiles (float64), once :attr:`done`."""
        top = 1 << (self.bits - 1)
        keys = np.array([int(p) for p in self.prefix], dtype=self.utype)
        u = np.where(keys & self.utype(top), keys ^ self.utype(top), ~keys)
        vals = u.view(self.dtype).astype(np.float64)
        order = {int(r): vals[i] for i, r in enumerate(self.ranks)}
        n_max = int(self.ranks.max())
        out = []
        for r, t in zip(self.lo_rank, self.frac):
            a, b = order[int(r)], order[min(int(r) + 1, n_max)]
            out.append(b - (b - a) * (1.0 - t) if t >= 0.5 else a + (b - a) * t)
        return np.array(out)


class EdgeDetector:
    """:func:`detect_edges` over a channel read in consecutive chunks, in bounded memory.

    The levels need whole passes over the channel before any edge can be placed (the
    threshold at a sample follows the levels of the windows around it): while
    :attr:`needs_pass` is true, feed the whole channel to :meth:`feed_levels` and call
    :meth:`end_pass`; then feed it once more to :meth:`feed`, which returns the events
    completed in each chunk (an edge that straddles two chunks is returned with the
    later one). The events equal those of :func:`detect_edges` on the whole channel.

    Parameters
    ----------
    n_samples : int
        Samples in the whole channel.
    fs, edge, threshold, hysteresis, t0, level_window_s
        As :func:`detect_edges`.

    Notes
    -----
    Memory: one level window (``level_window_s``) of samples, the per-window levels
    (four numbers per window) and the work arrays of the chunk being fed. Passes over
    the channel: one for the level windows (default), none with a fixed threshold and
    hysteresis, two (float32) or four (float64) for the record-wide percentiles that
    set the hysteresis of a fixed threshold given without one.
    """

    def __init__(self, n_samples: int, fs: float, *, edge: Literal["rising", "falling"] = "rising",
                 threshold: float | None = None, hysteresis: float | None = None,
                 t0: float = 0.0, level_window_s: float = 2.0):
        if isinstance(n_samples, bool) or int(n_samples) != n_samples or n_samples < 0:
            raise TachError(invalid_value("n_samples", n_samples, "a sample count >= 0"))
        if not (np.isfinite(fs) and fs > 0):
            raise TachError(invalid_value("fs", fs, "a positive sample rate in Hz"))
        if edge not in ("rising", "falling"):
            raise TachError(invalid_value("edge", edge, "'rising' or 'falling'"))
        if hysteresis is not None and not (np.isfinite(hysteresis) and hysteresis >= 0):
            raise TachError(invalid_value("hysteresis", hysteresis, "a non-negative level"))
        if not (np.isfinite(level_window_s) and level_window_s > 0):
            raise TachError(invalid_value("level_window_s", level_window_s, "a positive time in s"))
        self.n = int(n_samples)
        self.fs = float(fs)
        self.t0 = float(t0)
        self._sign = -1.0 if edge == "falling" else 1.0
        self._threshold = None if threshold is None else self._sign * float(threshold)
        self._hysteresis = hysteresis
        self._dtype = None
        self._quantiles = None
        self._pos = 0  # next sample index expected
        self._none = self.n < 3  # nothing to detect
        if self._threshold is None:
            self._bounds = _block_bounds(self.n, max(64, int(round(level_window_s * fs))))
            nb = self._bounds.size - 1
            self._lo, self._hi = np.empty(nb), np.empty(nb)
            self._pending: list[np.ndarray] = []
            self._block_i = 0
            self._levels_known = False
        else:
            self._levels_known = hysteresis is not None
        # edge-pass state carried across chunks
        self._last_def = None  # (index, state) of the last definite sample
        self._last_x = None  # (value, threshold, above) of the previous sample
        self._pending_cross = None  # time of the last crossing after the last definite

    # -- passes ---------------------------------------------------------------------
    @property
    def needs_pass(self) -> bool:
        """True while another level pass over the channel is needed."""
        return not (self._none or self._levels_known)

    def _chunk(self, x, start: int) -> np.ndarray:
        x = np.asarray(x)
        if x.ndim != 1:
            raise TachError(invalid_value("x", f"array of shape {x.shape}", "a 1-D tach chunk"))
        if x.dtype.kind != "f":
            x = x.astype(np.float64)
        if self._dtype is None:
            self._dtype = x.dtype
        elif x.dtype != self._dtype:
            x = x.astype(self._dtype)
        if int(start) != self._pos:
            raise TachError(invalid_value("start", start, f"the next sample index {self._pos} "
                                          "(chunks must be consecutive)"))
        if self._pos + x.size > self.n:
            raise TachError(invalid_value("x", f"{self._pos + x.size} samples",
                                          f"at most n_samples={self.n}"))
        if not self._none and not np.all(np.isfinite(x)):
            raise TachError(invalid_value("x", "a channel with NaN or inf", "finite samples"))
        self._pos += x.size
        return x if self._sign > 0 else -x

    def feed_levels(self, x, start: int) -> None:
        """One chunk of a level pass (samples ``start`` ... of the channel)."""
        x = self._chunk(x, start)
        if self._none:
            return
        if self._threshold is not None:  # record-wide percentiles for the hysteresis
            if self._quantiles is None:
                self._quantiles = _ExactQuantiles(self.n, [_Q_LO, _Q_HI], x.dtype)
            self._quantiles.feed(x)
            return
        a = int(start)
        b = a + x.size
        while self._block_i < self._lo.size:
            lo_b, hi_b = self._bounds[self._block_i], self._bounds[self._block_i + 1]
            if lo_b >= b:
                break
            self._pending.append(x[max(lo_b, a) - a:min(hi_b, b) - a])
            if hi_b > b:
                break
            seg = np.concatenate(self._pending) if len(self._pending) > 1 else self._pending[0]
            self._lo[self._block_i], self._hi[self._block_i] = np.percentile(seg, [_Q_LO, _Q_HI])
            self._pending = []
            self._block_i += 1

    def end_pass(self) -> None:
        """End of a level pass (the whole channel was fed)."""
        if self._pos != self.n:
            raise TachError(invalid_value("levels pass", f"{self._pos} samples fed",
                                          f"the whole channel ({self.n} samples)"))
        self._pos = 0
        if self._none:
            return
        if self._threshold is not None:
            self._quantiles.end_pass()
            if self._quantiles.done:
                lo_g, hi_g = self._quantiles.values()
                self._half = 0.1 * (hi_g - lo_g)
                self._levels_known = True
            return
        centres, lo, hi = _finish_levels(self._bounds, self._lo, self._hi, self.n)
        self._centres = centres
        if lo.size == 1:
            self._mid = np.full(1, 0.5 * (lo[0] + hi[0]))
            self._span = np.full(1, hi[0] - lo[0])
        else:
            self._mid = 0.5 * (lo + hi)
            self._span = hi - lo
        if np.max(self._span) <= 0:
            self._none = True
        self._levels_known = True

    # -- edges ----------------------------------------------------------------------
    def _levels(self, a: int, m: int, dtype):
        """Threshold and hysteresis half-width at samples a ... a + m - 1."""
        if self._threshold is not None:
            thr = self._threshold
            half = 0.5 * float(self._hysteresis) if self._hysteresis is not None else self._half
            return thr, half
        if self._mid.size == 1:
            thr = self._mid[0]
            half = 0.1 * self._span[0]
        else:
            idx = np.arange(a, a + m)
            thr = np.interp(idx, self._centres, self._mid).astype(dtype, copy=False)
            half = 0.1 * np.interp(idx, self._centres, self._span)
        if self._hysteresis is not None:
            half = 0.5 * self._hysteresis
        return thr, half

    def feed(self, x, start: int) -> np.ndarray:
        """One chunk of the edge pass: event times (s) of the edges completed in it."""
        if self.needs_pass:
            raise TachError("EdgeDetector.feed before the level passes are done "
                            "(feed_levels the whole channel while needs_pass)")
        x = self._chunk(x, start)
        if self._none or x.size == 0:
            return np.empty(0)
        a = int(start)
        thr, half = self._levels(a, x.size, x.dtype)
        # Hysteresis state: +1 above the upper level, -1 below the lower, 0 in between.
        state = (x > thr + half).astype(np.int8)
        state -= (x < thr - half)
        definite = np.flatnonzero(state)
        s = state[definite]
        del state
        definite += a
        # threshold crossings between sample c and c + 1 (c = a - 1: the previous chunk's
        # last sample), each with its interpolated time
        above = x >= thr
        cross = np.flatnonzero(above[1:] & ~above[:-1])
        x0 = x[cross].astype(np.float64)
        x1 = x[cross + 1].astype(np.float64)
        thr_c = thr[cross].astype(np.float64) if np.ndim(thr) else thr
        c_idx = cross + a
        t_cross = self.t0 + (c_idx + (thr_c - x0) / (x1 - x0)) / self.fs
        if self._last_x is not None and not self._last_x[2] and above[0]:
            xp, tp, _ = self._last_x
            x1f = float(x[0])
            t_first = self.t0 + (a - 1 + (tp - xp) / (x1f - xp)) / self.fs
            c_idx = np.concatenate([[a - 1], c_idx])
            t_cross = np.concatenate([[t_first], t_cross])
        thr_last = float(thr[-1]) if np.ndim(thr) else float(thr)
        self._last_x = (float(x[-1]), thr_last, bool(above[-1]))
        del above
        # rising transitions between consecutive definite samples (the carried one first)
        if self._last_def is not None:
            definite = np.concatenate([[self._last_def[0]], definite])
            s = np.concatenate([[self._last_def[1]], s])
        if definite.size:
            change = np.flatnonzero((s[1:] == 1) & (s[:-1] == -1))
            i_low = definite[change]
            i_high = definite[change + 1]
            # the last crossing before i_high, if at or after i_low
            j = np.searchsorted(c_idx, i_high, side="left") - 1
            ok = j >= 0
            ev = np.full(change.size, np.nan)
            ev[ok] = np.where(c_idx[j[ok]] >= i_low[ok], t_cross[j[ok]], np.nan)
            if change.size and not ok[0] and self._pending_cross is not None \
                    and self._last_def is not None and i_low[0] == self._last_def[0]:
                ev[0] = self._pending_cross  # crossed in an earlier chunk
            events = ev[np.isfinite(ev)]
            last = int(definite[-1])
            self._last_def = (last, int(s[-1]))
            after = c_idx >= last
            if np.any(after):
                self._pending_cross = float(t_cross[after][-1])
            elif last >= a:  # a definite sample in this chunk, no crossing after it
                self._pending_cross = None
        else:
            events = np.empty(0)
            if c_idx.size:
                self._pending_cross = float(t_cross[-1])
        return events

    def finish(self) -> np.ndarray:
        """End of the edge pass: no edge is left pending (an edge needs its high sample)."""
        return np.empty(0)


#: Samples per piece when :func:`detect_edges` works through a whole channel.
EDGE_CHUNK_SAMPLES = 1 << 20


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
        (tens of millions of samples); it is worked through in pieces of
        :data:`EDGE_CHUNK_SAMPLES` (bounded work memory). A channel read in chunks goes
        through :class:`EdgeDetector` with the same result.
    fs : float
        Sample rate in Hz.
    edge : {'rising', 'falling'}
        Which edge is the reference event (see :mod:`rundash.conventions`).
    threshold : float, optional
        Fixed threshold in the units of ``x``. By default the threshold follows the
        midpoint of the low and high levels, estimated per window of
        ``level_window_s`` from the 0.25th and 99.75th percentiles (so a keyway
        notch or a pulse only 0.5 % of a revolution wide still sets a level) and
        interpolated between windows, so a slow DC drift of a proximity-probe tach over
        a notch or keyway does not move the events.
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
    det = EdgeDetector(x.size, fs, edge=edge, threshold=threshold, hysteresis=hysteresis,
                       t0=t0, level_window_s=level_window_s)
    step = EDGE_CHUNK_SAMPLES
    while det.needs_pass:
        for a in range(0, x.size, step):
            det.feed_levels(x[a:a + step], a)
        det.end_pass()
    parts = [det.feed(x[a:a + step], a) for a in range(0, x.size, step)]
    parts.append(det.finish())
    return np.concatenate(parts)


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


#: Fewest pulse intervals agreeing with the one before (within 25 %) for a plausible
#: pulse train; a shaft's tach has nearly all, noise about a third (common practice, no
#: source; measured on white and low-passed noise: 34 % and 43 %).
MIN_REGULAR_FRACTION = 0.6

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
        With fewer than 4 revolutions of events, or events that are not increasing, or
        (with ``repair``) a train of at least 20 pulses of which fewer than
        :data:`MIN_REGULAR_FRACTION` of the intervals agree within 25 % with the one
        before: noise on the channel, not once-per-rev events.
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
        _check_plausible(pulses)
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


def _check_plausible(pulses: np.ndarray) -> None:
    """Refuse a pulse train that no turning shaft makes (noise on the tach channel)."""
    d = np.diff(pulses)
    if d.size < 20:
        return
    r = d[1:] / d[:-1]
    regular = float(np.mean((r >= 0.8) & (r <= 1.25)))
    if regular < MIN_REGULAR_FRACTION:
        raise TachError(
            f"The tach shows no plausible once-per-rev events: only {100 * regular:.0f} % of "
            f"{d.size} pulse intervals agree within 25 % with the one before (a turning "
            f"shaft gives nearly all); check that the tach column carries the "
            f"once-per-rev reference, and its edge and threshold")


def edge_spans(x, fs: float, event_times_s, *, t0: float = 0.0,
               max_events: int = 2000) -> np.ndarray:
    """Sample intervals spanned by the edge of each event inside ``x`` (a channel or one
    block of it whose sample 0 lies at ``t0``); see :func:`edge_samples`. At most
    ``max_events``, evenly chosen; events too near the block's ends are left out."""
    x = np.asarray(x)
    ev = np.asarray(event_times_s, dtype=np.float64).ravel()
    c = np.floor((ev - t0) * fs + 1e-9).astype(np.int64)
    c = c[(c >= 4) & (c + 5 < x.size)]
    if c.size > max_events:
        c = c[np.linspace(0, c.size - 1, max_events).astype(np.int64)]
    if c.size == 0:
        return np.empty(0)
    win = x[c[:, None] + np.arange(-4, 6)[None, :]].astype(np.float64)
    span = win.max(axis=1) - win.min(axis=1)
    step = np.abs(win[:, 5] - win[:, 4])
    ok = (step > 0) & (span > 0)
    return span[ok] / step[ok]


def edge_samples(x, fs: float, event_times_s, *, t0: float = 0.0,
                 max_events: int = 2000, spans=None) -> float | None:
    """Sample intervals a tach edge spans, at the sharpest tenth of the detected events.

    For each event (at most ``max_events``, evenly chosen) the step between the two
    samples that straddle the crossing is compared with the local span (highest minus
    lowest sample within 4 samples of it): an edge sharper than the sample interval
    steps the whole span at once (1.0); a linear ramp over ``r`` samples steps ``1/r``
    of it. Results above about 8 only say "well sampled" (the 9-sample window). An edge
    of fixed angular width spans fewer samples the faster the shaft turns, so the 10th
    percentile over the events is returned: the edges of the top tenth of the speeds.
    Linear interpolation of the threshold crossing is exact on a ramp spanning more
    than one sample, and quantised to the sample grid on a sharper edge (DESIGN.md
    section 4; common practice, no source).

    Parameters
    ----------
    x : array_like, shape (n_samples,)
        The tach channel (or a block of it whose sample 0 lies at ``t0``).
    fs : float
        Sample rate in Hz.
    event_times_s : array_like
        Event times in s from :func:`detect_edges` (those outside ``x`` are ignored).
    spans : array_like, optional
        Per-event spans already gathered with :func:`edge_spans` (a channel read in
        chunks); ``x`` and ``event_times_s`` are then not read.

    Returns
    -------
    float or None
        None when no event lies inside ``x``.
    """
    r = edge_spans(x, fs, event_times_s, t0=t0, max_events=max_events) if spans is None \
        else np.asarray(spans, dtype=np.float64)
    if r.size == 0:
        return None
    return float(np.percentile(r, 10.0))


def timing_jitter(event_times_s) -> tuple[float, float] | None:
    """Rms timing jitter of once-per-rev events, in s and in degrees of rotation.

    Third differences ``t[k+2] - 3 t[k+1] + 3 t[k] - t[k-1]`` cancel any speed history
    whose time-against-angle is locally quadratic, and multiply independent jitter of
    rms ``s`` by ``sqrt(20)``; the median absolute third difference (scaled by 1.4826,
    the normal consistency factor) ignores the few revolutions of a hard start or a
    repaired pulse. Degrees are at the median revolution time.

    Returns
    -------
    (jitter_s, jitter_deg) or None
        None with fewer than 8 events.
    """
    t = np.asarray(event_times_s, dtype=np.float64).ravel()
    if t.size < 8:
        return None
    d3 = t[3:] - 3.0 * t[2:-1] + 3.0 * t[1:-2] - t[:-3]
    js = 1.4826 / math.sqrt(20.0) * float(np.median(np.abs(d3)))
    return js, 360.0 * js / float(np.median(np.diff(t)))


def local_jitter_s(event_times_s, window: int = 200) -> np.ndarray:
    """Rms timing jitter per event (s), as :func:`timing_jitter` over blocks of ``window``
    events (the largest of five neighbouring blocks) and interpolated between block
    centres: a record whose tach edge is resolved at 200 rpm and quantised to the sample
    grid at 6000 rpm has no single jitter.

    Returns
    -------
    ndarray, shape (n_events,)
        Empty with fewer than 8 events.
    """
    t = np.asarray(event_times_s, dtype=np.float64).ravel()
    if t.size < 8:
        return np.empty(0)
    a = np.abs(t[3:] - 3.0 * t[2:-1] + 3.0 * t[1:-2] - t[:-3])
    w = int(max(8, min(window, a.size)))
    nb = max(1, a.size // w)
    edges = np.linspace(0, a.size, nb + 1).astype(np.int64)
    med = np.array([np.median(a[edges[b]:edges[b + 1]]) for b in range(nb)])
    # the largest of five neighbouring blocks: while a revolution lasts nearly a whole
    # number of samples, a quantised edge's error hardly changes from one event to the
    # next and its third differences vanish, though the error itself does not
    pad = np.pad(med, 2, mode="edge")
    med = np.max(np.lib.stride_tricks.sliding_window_view(pad, 5), axis=1)
    centre = 0.5 * (edges[:-1] + edges[1:]) + 1.5  # d3[i] sits between events i+1, i+2
    return 1.4826 / math.sqrt(20.0) * np.interp(np.arange(t.size), centre, med)


@dataclass(frozen=True)
class TachQuality:
    """How far the once-per-rev events can be trusted.

    Attributes
    ----------
    edge_samples : float or None
        Median sample intervals spanned by an edge (:func:`edge_samples`).
    jitter_s, jitter_deg : float or None
        Rms timing jitter of the once-per-rev events (:func:`timing_jitter`), in s and
        in degrees of rotation; the notes quote the worst tenth of the events
        (:func:`local_jitter_s`).
    fs : float or None
        Sample rate of the tach channel in Hz.
    notes : tuple of str
        Warnings in words (also issued as :class:`TachQualityWarning`).
    """

    edge_samples: float | None
    jitter_s: float | None
    jitter_deg: float | None
    fs: float | None
    notes: tuple[str, ...]
    worst_jitter_s: float | None = None

    @property
    def quantised(self) -> bool:
        """True when the edges are sharper than the sample grid resolves."""
        return self.edge_samples is not None and self.edge_samples < MIN_EDGE_SAMPLES

    @property
    def jitter_floor_s(self) -> float:
        """Least rms timing error of any event, s: ``1 / (sqrt(12) fs)`` for quantised
        edges (uniform within a sample), else 0 (for
        :func:`rundash.dsp.speed.speed_profile`)."""
        if not self.quantised or not self.fs:
            return 0.0
        return 1.0 / (math.sqrt(12.0) * self.fs)

    def angle_bound_rad(self, speed_rpm) -> np.ndarray:
        """Bound of the reference angle error that fitting cannot remove, in radians.

        An event read from an edge the sample grid does not resolve is off by an amount
        that, while a revolution lasts close to a whole number of samples, stays put for
        many revolutions: no fit through the events removes it. Its bound is twice the
        rms jitter of the worst tenth of the events (a step edge: 2 / sqrt(12) of a
        sample, about the half sample it can be off), as rotation at ``speed_rpm``.
        Zero for well-sampled edges (their jitter is random and shows in the scatter of
        the vectors).
        """
        n = np.asarray(speed_rpm, dtype=np.float64)
        if not self.quantised or not self.worst_jitter_s:
            return np.zeros(n.shape)
        return 2.0 * self.worst_jitter_s * 2.0 * np.pi * np.abs(n) / 60.0


#: An edge spanning fewer sample intervals than this is under-sampled (common practice,
#: no source: linear interpolation needs both straddling samples on the edge).
MIN_EDGE_SAMPLES = 2.0
#: Rms jitter of the once-per-rev events, degrees of rotation, above which the tach is
#: called jittery: the 1X phase of one revolution scatters by as much (our own choice,
#: half a degree; the speed model fits through it).
MAX_JITTER_DEG = 0.5


def tach_quality(edge_span_samples: float | None, rev_times_s,
                 fs: float | None = None) -> TachQuality:
    """Judge the once-per-rev reference; warn with :class:`TachQualityWarning`.

    Parameters
    ----------
    edge_span_samples : float or None
        From :func:`edge_samples` on the tach channel.
    rev_times_s : array_like
        Once-per-rev event times in s (:attr:`OncePerRev.times_s`).
    fs : float, optional
        Sample rate of the tach channel in Hz (for :meth:`TachQuality.angle_bound_rad`).
    """
    t = np.asarray(rev_times_s, dtype=np.float64).ravel()
    jit = timing_jitter(t)
    js, jd = jit if jit is not None else (None, None)
    worst = worst_s = None  # rms jitter of the worst tenth of the events, deg and s
    if jit is not None:
        local = local_jitter_s(t)
        worst = float(np.percentile(360.0 * local[1:] / np.diff(t), 90.0))
        worst_s = float(np.percentile(local, 90.0))
    notes = []
    if edge_span_samples is not None and edge_span_samples < MIN_EDGE_SAMPLES:
        notes.append(
            f"tach edges span {edge_span_samples:.1f} sample interval(s) (fewer than "
            f"{MIN_EDGE_SAMPLES:g}): the events are quantised to the sample grid"
            + (f", up to {worst:.2f} deg of rotation rms" if worst is not None else "")
            + "; a higher sample rate or a slower edge gives a better phase reference")
    elif worst is not None and worst > MAX_JITTER_DEG:
        notes.append(f"tach events jitter by up to {worst:.2f} deg of rotation rms (more than "
                     f"{MAX_JITTER_DEG:g} deg): check the tach signal and its threshold")
    for n in notes:
        warnings.warn(n, TachQualityWarning, stacklevel=2)
    return TachQuality(edge_span_samples, js, jd, fs, tuple(notes), worst_s)
