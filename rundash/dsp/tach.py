"""Once-per-rev reference: edge detection on a tach channel (this module), pulse repair
(:mod:`rundash.dsp.pulses`) and the tach's quality (:mod:`rundash.dsp.tach_quality`),
all importable from here.

Conventions (edge, threshold, hysteresis, pulses per revolution) are those of
:mod:`rundash.conventions`.
"""

from __future__ import annotations

from typing import Literal

import numpy as np

from rundash.errors import TachError, invalid_value

__all__ = ["detect_edges", "EdgeDetector", "once_per_rev", "OncePerRev", "MIN_REVOLUTIONS",
           "edge_samples", "edge_spans", "timing_jitter", "local_jitter_s", "TachQuality",
           "tach_quality", "MIN_EDGE_SAMPLES", "MAX_JITTER_DEG"]


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


# pulse repair and tach quality, importable from here as before the split
from rundash.dsp.pulses import MIN_REVOLUTIONS, OncePerRev, once_per_rev  # noqa: E402
from rundash.dsp.tach_quality import (  # noqa: E402
    MAX_JITTER_DEG, MIN_EDGE_SAMPLES, TachQuality, edge_samples, edge_spans, local_jitter_s,
    tach_quality, timing_jitter,
)
