"""Computed order tracking: nX vectors per block of whole revolutions.

Method
------
A synchronous discrete Fourier transform over each block of ``revs_per_block`` whole
revolutions, computed directly on the original samples (no resampling):

.. math::

    c_m = \\frac{2}{R} \\int_{k}^{k+R} x(\\theta)\\, e^{-j 2 \\pi m \\theta}\\, d\\theta

where ``theta`` is the shaft angle in revolutions from the speed profile
(:class:`rundash.dsp.SpeedProfile`), ``m`` the order and ``R`` the revolutions per
block. The integral is the trapezoid rule over the samples' angles, with the block's
exact angular limits ``k`` and ``k + R`` falling between samples handled by linear
interpolation of the integrand (so each block spans exactly ``R`` revolutions, whatever
the non-integer number of samples per revolution). With this normalisation ``|c|`` is
the peak amplitude and the phasor follows :mod:`rundash.conventions`
(``lag = lag_deg_from_phasor(c)``); the probe's mounting angle is not applied.

How it is computed. Per revolution ``k`` the tracker takes the window of samples from
the one before the reference event ``t_k`` to the first at or after ``t_(k+1)`` and
evaluates, in the working precision and shared by every channel:

- the local angle ``u = theta - k`` at window position ``i`` from the speed profile's
  own cubic of that revolution, rewritten as a cubic in ``i``: the angle is anchored
  afresh at every reference event, so its float32 rounding (about 1e-7 rev) does not
  grow with the number of revolutions since the record's start;
- the trapezoid weights ``W_i``: in the interior ``(u(i+1) - u(i-1)) / 2``, a quadratic
  in ``i`` exact for the cubic, and at the window's two ends the weights of the linear
  interpolation to the exact limits ``u = 0`` and ``u = 1``;
- ``W cos`` and ``W sin`` of ``2 pi p u`` for every order: one cosine and sine of the
  base order (1X, or 0.5X with half orders) per sample, the higher multiples ``p`` by
  the complex recurrence ``e_(p+1) = e_p e_1`` (error about ``p (eta + 1.4 gamma_2)``
  of ``W``, linear in ``p``, never in the number of samples: every sample starts from
  its own base phase; bound tested against direct cos/sin in
  tests/dsp/test_orders_kernels.py). Orders that are not such multiples use a direct
  cosine and sine each.

The per-revolution work is then one small matrix product ``VT @ x[:, window].T`` (rows
``W cos``, ``W sin`` per order and ``W`` itself, times the channels, read in place) and
the sum of each row over the same window (its quadrature alone), blocks of ``R``
revolutions are sums of their revolutions, and the direct levels are reductions over
each block's samples. Revolutions are computed in groups of about ``GROUP_SAMPLES``
samples so the work arrays stay in cache; each revolution's result depends only on its
own samples (to the last bit), whatever the grouping or the chunks fed. The kernels are
in :mod:`rundash.dsp.order_kernels`.

Speed: see the module's benchmark, benchmarks/bench_orders.py (16 channels x 4 orders,
float32 at 25.6 kHz, 20 s run-up 1200-9000 rpm), which prints the rate against the
memory-read limit and against resampling baselines in the same run (README,
Performance). The method reads the data once and needs no resampled copy; against
resampling each channel with ``np.interp`` to a uniform angle grid fine enough to keep
every sample (2048 points per revolution here) and an FFT per revolution it has equal
amplitude and lower phase error (the resampling's linear interpolation and the
piecewise-linear angle it needs cost accuracy); a coarse 64-point grid drops samples at
low speed and aliases the noise into the orders (1.6 x our amplitude error in the same
run). Float32 data are tracked in float32: the products and sums then carry float32
rounding, about 1e-7 of the largest sample per block.

The rule's own error on a constant (the quadrature of ``exp(-j 2 pi m theta)`` alone,
zero exactly) is removed with the block's mean, so a large DC gap voltage does not leak
into the orders (measured: 4e-17 of the DC level for float64 data).

Limitation shared by every per-revolution transform: when the amplitude changes fast
within a block, by dA/A per revolution, the block picks up about (dA/A) / (4 pi) rad
of the conjugate component (the DFT of a linearly modulated cosine), e.g. 1 deg at
20 % per revolution. It matters only at the first revolutions of a hard start.

Half orders: an order ``m`` needs ``m * revs_per_block`` to be an integer, so 0.5X,
1.5X ... need an even number of revolutions per block.

Block times are the midpoint in time between the block's first and last reference
angle; block speeds are the mean speed over the block, ``60 R / (t(k + R) - t(k))``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from rundash.dsp import order_kernels as kern
from rundash.dsp.speed import SpeedProfile
from rundash.errors import DspError, invalid_value

__all__ = ["OrderTrack", "OrderTracker", "track_orders", "concat_tracks", "first_samples"]

#: Samples per chunk when a whole record is tracked in one call (bounds the memory).
CHUNK_SAMPLES = 1 << 18
#: Samples per piece inside :meth:`OrderTracker.feed`.
SUB_SAMPLES = 1 << 18
#: Samples per group of blocks computed together (keeps the work arrays in cache; each
#: group also costs a fixed number of numpy calls: on the benchmark's 16 channels 24576
#: was faster than 16384 and 49152, see benchmarks/bench_orders.py).
GROUP_SAMPLES = 3 << 13
#: Highest multiple of the base order built by recurrence (see ``_exponentials``).
MAX_POWER = 8


@dataclass(frozen=True)
class OrderTrack:
    """nX vectors per block of whole revolutions.

    Attributes
    ----------
    time_s : ndarray, shape (n_blocks,)
        Block time in s (midpoint between the block's first and last reference angle).
    speed_rpm : ndarray, shape (n_blocks,)
        Mean shaft speed over the block in rpm.
    orders : ndarray of float, shape (n_orders,)
        Tracked orders (1.0 = 1X).
    vectors : ndarray of complex128, shape (n_channels, n_orders, n_blocks)
        Complex phasors ``c`` (:mod:`rundash.conventions`): ``|c|`` is the peak
        amplitude in the channel's units, ``lag_deg_from_phasor(c)`` the phase lag.
    direct_pp : ndarray, shape (n_channels, n_blocks)
        Direct (unfiltered) peak-to-peak (max - min) of the samples in the block (NaN
        for a channel whose tracker was asked for its rms alone, ``direct="rms"``).
    direct_rms : ndarray, shape (n_channels, n_blocks)
        Direct rms of the samples in the block (NaN for a channel asked for its p-p
        alone, ``direct="pp"``).
    rev_index : ndarray of int64, shape (n_blocks,)
        Revolution (reference event index) where each block starts.
    """

    time_s: np.ndarray
    speed_rpm: np.ndarray
    orders: np.ndarray
    vectors: np.ndarray
    direct_pp: np.ndarray
    direct_rms: np.ndarray
    rev_index: np.ndarray

    def concat(self, *others: "OrderTrack") -> "OrderTrack":
        """This track followed by ``others`` (see :func:`concat_tracks`)."""
        return concat_tracks((self, *others))

    @classmethod
    def empty(cls, n_channels: int, orders) -> "OrderTrack":
        """A track with no blocks."""
        orders = np.asarray(orders, dtype=np.float64)
        return cls(np.empty(0), np.empty(0), orders,
                   np.empty((n_channels, orders.size, 0), np.complex128),
                   np.empty((n_channels, 0)), np.empty((n_channels, 0)),
                   np.empty(0, np.int64))

    @property
    def n_blocks(self) -> int:
        return int(self.time_s.size)

    @property
    def n_channels(self) -> int:
        return int(self.vectors.shape[0])


def concat_tracks(tracks) -> OrderTrack:
    """Join tracks of consecutive chunks (same channels and orders) in block order."""
    tracks = list(tracks)
    if not tracks:
        raise DspError(invalid_value("tracks", "an empty sequence", "at least one OrderTrack"))
    first = tracks[0]
    for tr in tracks[1:]:
        if tr.n_channels != first.n_channels or not np.array_equal(tr.orders, first.orders):
            raise DspError(invalid_value(
                "tracks", "tracks with different channels or orders",
                f"{first.n_channels} channels and orders {first.orders.tolist()}"))
    return OrderTrack(
        time_s=np.concatenate([t.time_s for t in tracks]),
        speed_rpm=np.concatenate([t.speed_rpm for t in tracks]),
        orders=first.orders.copy(),
        vectors=np.concatenate([t.vectors for t in tracks], axis=2),
        direct_pp=np.concatenate([t.direct_pp for t in tracks], axis=1),
        direct_rms=np.concatenate([t.direct_rms for t in tracks], axis=1),
        rev_index=np.concatenate([t.rev_index for t in tracks]),
    )


def _check_orders(orders, revs_per_block) -> tuple[np.ndarray, int]:
    if isinstance(revs_per_block, bool) or int(revs_per_block) != revs_per_block or revs_per_block < 1:
        raise DspError(invalid_value("revs_per_block", revs_per_block, "an integer >= 1"))
    R = int(revs_per_block)
    o = np.atleast_1d(np.asarray(orders, dtype=np.float64))
    if o.ndim != 1 or o.size == 0 or not np.all(np.isfinite(o)) or np.any(o <= 0):
        raise DspError(invalid_value("orders", orders, "a non-empty sequence of positive orders"))
    mr = o * R
    if np.any(np.abs(mr - np.round(mr)) > 1e-9):
        raise DspError(invalid_value(
            "orders", o.tolist(),
            f"orders that make whole cycles in revs_per_block={R} revolutions "
            "(half orders need an even revs_per_block)"))
    return o, R


def first_samples(t_k, fs: float) -> np.ndarray:
    """Record index of the first sample at or after each time ``t_k`` s (sample n is at
    time ``n / fs``), exact in the float64 arithmetic used for sample times: a block of
    revolutions starts at the first sample of its first revolution.

    >>> first_samples(np.array([0.0, 0.0101, 0.02]), 100.0).tolist()
    [0, 2, 2]
    """
    t_k = np.asarray(t_k, dtype=np.float64)
    n = np.ceil(t_k * fs)
    n -= (n - 1.0) / fs >= t_k
    n += n / fs < t_k
    return n.astype(np.int64)


#: What :class:`OrderTracker`'s ``direct`` may ask of a channel.
DIRECT_LEVELS = ("both", "pp", "rms")


def _level_runs(direct, n_channels: int) -> list[tuple[int, int, str]]:
    """``direct`` (one of :data:`DIRECT_LEVELS`, or one per channel) as runs of adjacent
    channels that ask for the same levels: ``(first, end, levels)``."""
    per = [direct] * n_channels if isinstance(direct, str) else list(direct)
    if len(per) != n_channels or any(not isinstance(d, str) or d not in DIRECT_LEVELS
                                     for d in per):
        raise DspError(invalid_value("direct", direct, f"one of {DIRECT_LEVELS}, or one of "
                                     f"them for each of the {n_channels} channels"))
    runs: list[tuple[int, int, str]] = []
    for i, d in enumerate(per):
        if runs and runs[-1][2] == d:
            runs[-1] = (runs[-1][0], i + 1, d)
        else:
            runs.append((i, i + 1, d))
    return runs


class OrderTracker:
    """Streaming computed order tracking over consecutive chunks of a record.

    Parameters
    ----------
    profile : SpeedProfile
        Speed profile of the record.
    fs : float
        Sample rate in Hz (all channels share one time base; time = index / fs).
    n_channels : int
        Channels per chunk.
    orders : sequence of float
        Orders to track (positive; see the module doc for half orders).
    revs_per_block : int
        Whole revolutions per block.
    direct : str or sequence of str
        The direct levels to compute, for every channel or one entry per channel:
        ``"both"`` (default), ``"pp"`` (peak-to-peak alone, e.g. a proximity probe's
        level) or ``"rms"`` (alone, e.g. a seismic probe's). A level not asked for is
        NaN in the track; the p-p alone saves two of the four passes over the samples.

    Notes
    -----
    :meth:`feed` returns the blocks completed so far and keeps the leftover tail, so
    feeding consecutive chunks gives the same vectors (to rounding) as one call of
    :func:`track_orders` on the whole record.
    """

    def __init__(self, profile: SpeedProfile, fs: float, n_channels: int, *,
                 orders=(1, 2, 3, 4), revs_per_block: int = 1, direct="both"):
        if not isinstance(profile, SpeedProfile):
            raise DspError(invalid_value("profile", type(profile).__name__, "a SpeedProfile"))
        if not (np.isfinite(fs) and fs > 0):
            raise DspError(invalid_value("fs", fs, "a positive sample rate in Hz"))
        if isinstance(n_channels, bool) or int(n_channels) != n_channels or n_channels < 1:
            raise DspError(invalid_value("n_channels", n_channels, "an integer >= 1"))
        self.orders, self.revs_per_block = _check_orders(orders, revs_per_block)
        self.profile = profile
        self.fs = float(fs)
        self.n_channels = int(n_channels)
        self._level_runs = _level_runs(direct, self.n_channels)
        rev_t = profile._t
        min_rev_s = float(np.min(np.diff(rev_t)))
        samples_per_cycle = fs * min_rev_s / float(np.max(self.orders))
        if samples_per_cycle < 2.5:
            raise DspError(
                f"Sample rate too low: fs={fs} Hz gives {samples_per_cycle:.2f} samples per "
                f"cycle of order {np.max(self.orders):g} at the top speed "
                f"({60.0 / min_rev_s:.0f} rpm); need at least 2.5")
        self._j_next = 0
        self._tail = np.empty((self.n_channels, 0))
        self._tail_start: int | None = None
        # samples of the longest block, to size the joined head of each chunk
        self._head_samples = max(4096, int(2 * self.revs_per_block * np.max(np.diff(rev_t)) * fs) + 8)
        self._bufs: dict[str, np.ndarray] = {}
        self._ii = np.empty(0)
        # exponentials: orders that are whole multiples (<= MAX_POWER) of a base order
        # (1X, or 0.5X with half orders) by recurrence from the base, others directly
        o2 = np.round(self.orders * 2).astype(np.int64)
        halves = np.all(np.abs(self.orders * 2 - o2) < 1e-12)
        if halves and np.all(o2 % 2 == 0) and o2.max() // 2 <= MAX_POWER:
            self._base_order, self._powers = 1.0, o2 // 2
        elif halves and o2.max() <= MAX_POWER:
            self._base_order, self._powers = 0.5, o2
        else:
            self._base_order, self._powers = 1.0, None
        # per-revolution phase exp(-j 2 pi m k) of orders m not whole (m k not whole)
        whole = np.abs(self.orders - np.round(self.orders)) < 1e-12
        self._rev_phase = None if np.all(whole) else np.where(whole, 0.0, self.orders)

    # -- public ---------------------------------------------------------------------
    def feed(self, block, start_index: int) -> OrderTrack:
        """Process a chunk ``block`` (n_channels, n_samples) whose first sample has index
        ``start_index`` in the record; return the blocks completed so far."""
        return self._joined(self._parts(block, start_index))

    def _parts(self, block, start_index: int) -> list[OrderTrack]:
        """:meth:`feed` without the join: the non-empty tracks of its pieces, in order
        (a caller that joins many chunks' tracks copies them once)."""
        x = np.asarray(block)
        if x.ndim == 1 and self.n_channels == 1:
            x = x[None, :]
        if x.ndim != 2 or x.shape[0] != self.n_channels:
            raise DspError(invalid_value("block", f"array of shape {x.shape}",
                                         f"shape ({self.n_channels}, n_samples)"))
        if isinstance(start_index, bool) or int(start_index) != start_index or start_index < 0:
            raise DspError(invalid_value("start_index", start_index, "a sample index >= 0"))
        start_index = int(start_index)
        work = np.float32 if x.dtype == np.float32 else np.float64
        if x.dtype != work:
            x = x.astype(work)
        if self._tail_start is None:
            self._tail_start = start_index
            self._tail = np.empty((self.n_channels, 0), work)
        expected = self._tail_start + self._tail.shape[1]
        if start_index != expected:
            raise DspError(invalid_value("start_index", start_index,
                                         f"the next sample index {expected} (chunks "
                                         "must be consecutive)"))
        if self._tail.dtype != work:
            self._tail = self._tail.astype(work)
        if x.shape[1] > SUB_SAMPLES:
            # work through long chunks in pieces (bounds the per-piece arrays); the
            # results do not depend on it
            return [p for a in range(0, x.shape[1], SUB_SAMPLES)
                    for p in self._feed(x[:, a:a + SUB_SAMPLES], start_index + a)]
        return self._feed(x, start_index)

    def _feed(self, x: np.ndarray, start_index: int) -> list[OrderTrack]:
        """:meth:`_parts` on a validated piece in the working precision."""
        parts = []
        pos = self._tail_start  # record index of the first sample still needed
        if self._tail.shape[1]:
            # blocks that straddle the previous chunk: a small joined head, grown until
            # the next block starts inside the new chunk (no copy of the whole chunk)
            head = self._head_samples
            while True:
                h = min(head, x.shape[1])
                joined = np.concatenate([self._tail, x[:, :h]], axis=1)
                tr, keep = self._process(joined, self._tail_start)
                if tr.n_blocks:
                    parts.append(tr)
                if keep >= start_index or h == x.shape[1]:
                    break
                head *= 2
            pos = keep
            if keep < start_index:  # the whole chunk went into the head, still no block
                self._tail = joined[:, keep - self._tail_start:].copy()
                self._tail_start = keep
                return parts
        off = pos - start_index
        tr, keep = self._process(x[:, off:], pos)
        if tr.n_blocks:
            parts.append(tr)
        self._tail = x[:, keep - start_index:].copy()
        self._tail_start = keep
        return parts

    def finish(self) -> OrderTrack:
        """End of the record: release the tail (no block can complete without more data)."""
        self._tail = self._tail[:, :0].copy()
        return OrderTrack.empty(self.n_channels, self.orders)

    # -- internals ------------------------------------------------------------------
    def _joined(self, parts) -> OrderTrack:
        if not parts:
            return OrderTrack.empty(self.n_channels, self.orders)
        return parts[0] if len(parts) == 1 else concat_tracks(parts)

    def _work(self, name: str, shape, dtype) -> np.ndarray:
        """A reused work array of ``shape`` (a view of a buffer that only grows)."""
        size = math.prod(shape)
        buf = self._bufs.get(name)
        if buf is None or buf.size < size or buf.dtype != dtype:
            buf = np.empty(max(size, 1), dtype)
            self._bufs[name] = buf
        return buf[:size].reshape(shape)

    def _first_samples(self, t_k: np.ndarray) -> np.ndarray:
        return first_samples(t_k, self.fs)

    def _process(self, data: np.ndarray, base: int) -> tuple[OrderTrack, int]:
        """Blocks whose samples (one more on each side) all lie in ``data`` (whose
        first sample is record index ``base``); returns them and the first record index
        still needed."""
        n_ch, n = data.shape
        R = self.revs_per_block
        prof = self.profile
        n_blocks_max = prof.n_revs // R
        empty = OrderTrack.empty(n_ch, self.orders)
        if n == 0:
            return empty, base
        if self._j_next >= n_blocks_max:
            return empty, base + n  # past the profile's last whole block
        rev_t = prof._t
        fs = self.fs
        # revolution k starts at the first sample at or after rev_t[k]; a block needs the
        # sample before its first revolution's start and the first sample of the next
        k_first = int(np.searchsorted(rev_t, base / fs, side="right"))  # t_k > t(base)
        k_last = int(np.searchsorted(rev_t, (base + n - 1) / fs, side="right")) - 1
        j0 = max(self._j_next, -(-k_first // R))
        j1 = min(k_last // R - 1, n_blocks_max - 1)
        if j0 >= n_blocks_max:
            return empty, base + n
        if j1 < j0:  # no complete block: keep from the sample before block j0's start
            start = int(self._first_samples(rev_t[j0 * R:j0 * R + 1])[0])
            return empty, min(start - 1, base + n)
        k0, k1 = j0 * R, (j1 + 1) * R  # revolutions k0 .. k1 - 1
        na = self._first_samples(rev_t[k0:k1 + 1])  # first sample of each revolution
        if np.any(np.diff(na) < 2):
            raise DspError("A revolution holds fewer than 2 samples: the sample rate is too "
                           "low for the speed (or the speed profile is wrong)")
        nblk = j1 - j0 + 1
        n_o = self.orders.size
        n_rows = 2 * n_o + 1
        nr = k1 - k0
        work = data.dtype.type
        coef, ends = kern.revolution_cubics(prof._c, rev_t, fs, k0, na)
        # per revolution: rows x channels, and each row's quadrature alone (summed over
        # the same window, so it does not depend on how the revolutions are grouped)
        core = np.empty((nr, n_rows, n_ch), work)
        quad = np.empty((nr, 2 * n_o), work)  # the orders' rows (not W's)
        pp = np.empty((n_ch, nblk))
        rms = np.empty((n_ch, nblk))
        # groups of whole blocks of about GROUP_SAMPLES samples (work arrays in cache)
        b = 0
        starts = na[::R]  # first sample of each block, and the one after the last
        while b < nblk:
            e = int(np.searchsorted(starts, starts[b] + GROUP_SAMPLES, side="right")) - 1
            e = min(max(e, b + 1), nblk)
            r, re = b * R, e * R
            # the direct levels first: their streaming reductions bring the group's
            # samples into cache for the per-revolution products; their squares are
            # done with before the products fill the grid, so both use one buffer
            # (less in cache)
            seg = data[:, int(starts[b]) - base:int(starts[e]) - base]
            for c0, c1, want in self._level_runs:  # channels asking for the same levels
                sq = self._work("grid", (c1 - c0, seg.shape[1]), work)
                kern.direct_levels(seg[c0:c1], starts[b:e + 1], pp[c0:c1, b:e],
                                   rms[c0:c1, b:e], sq, want_pp=want != "rms",
                                   want_rms=want != "pp")
            self._products(data, base, na[r:re + 1], coef[:, r:re], ends[:, r:re],
                           core[r:re], quad[r:re])
            b = e
        # rows hold W cos and W sin: W exp(-j m ph) = W cos - j W sin; the last row
        # (W itself) gives the block mean D
        if self._rev_phase is None and R == 1:
            # The rule's own error on a constant: quad = quadrature of exp(-j 2 pi m
            # theta) alone (zero exactly); removing D * quad, D the block mean, cancels
            # the leakage of a large DC offset (a probe's gap) into the orders.
            # (the small float32 arrays are transposed to the output's order first: the
            # float64 arithmetic and the complex result are then written in order)
            ct = np.ascontiguousarray(core.transpose(2, 1, 0))  # (n_ch, rows, nr)
            qt = np.ascontiguousarray(quad.T)  # (rows, nr)
            Dt = ct[:, 2 * n_o].astype(np.float64)  # (n_ch, nr)
            v_re = ct[:, 0:2 * n_o:2] - Dt[:, None, :] * qt[0:2 * n_o:2]  # (n_ch, n_o, nr)
            v_im = Dt[:, None, :] * qt[1:2 * n_o:2] - ct[:, 1:2 * n_o:2]
            v_re *= 2.0
            v_im *= 2.0
            vectors = np.empty((n_ch, n_o, nblk), np.complex128)
            vectors.real = v_re
            vectors.imag = v_im
        else:
            D = core[:, 2 * n_o].astype(np.float64)  # (nr, n_ch)
            Q = core[:, 0:2 * n_o:2] - 1j * core[:, 1:2 * n_o:2]  # (nr, n_o, n_ch)
            Lq = quad[:, 0:2 * n_o:2] - 1j * quad[:, 1:2 * n_o:2]  # (nr, n_o)
            if self._rev_phase is not None:  # exp(-j 2 pi m k) for orders m k not whole
                f = np.exp(-2j * np.pi * np.mod(np.multiply.outer(np.arange(k0, k1),
                                                                  self._rev_phase), 1.0))
                Q *= f[:, :, None]
                Lq *= f
            if R > 1:
                Q = Q.reshape(nblk, R, n_o, n_ch).sum(axis=1)
                Lq = Lq.reshape(nblk, R, n_o).sum(axis=1)
                D = D.reshape(nblk, R, n_ch).sum(axis=1) / R
            # the same removal of the constant's leakage, per block
            vec = (Q - D[:, None, :] * Lq[:, :, None]) * (2.0 / R)  # (nblk, n_o, n_ch)
            vectors = np.ascontiguousarray(vec.transpose(2, 1, 0))
        ks = np.arange(j0, j1 + 1) * R
        t_a, t_b = rev_t[ks], rev_t[ks + R]
        track = OrderTrack(time_s=0.5 * (t_a + t_b), speed_rpm=60.0 * R / (t_b - t_a),
                           orders=self.orders.copy(), vectors=vectors, direct_pp=pp,
                           direct_rms=rms, rev_index=ks.astype(np.int64))
        self._j_next = j1 + 1
        if self._j_next >= n_blocks_max:
            return track, base + n
        start = int(self._first_samples(rev_t[self._j_next * R:self._j_next * R + 1])[0])
        return track, min(start - 1, base + n)

    def _products(self, data, base, na, A, ends, core, quad) -> None:
        """For the revolutions with first samples ``na`` (the last entry the first
        sample after them), local-angle coefficients ``A`` and end weights ``ends``
        (:func:`~rundash.dsp.order_kernels.revolution_cubics`): ``core[r] = VT_r @
        window_r.T`` (rows x channels) and ``quad[r]`` the order rows' own quadratures, where
        the rows of ``VT_r`` are ``W cos`` and ``W sin`` of each order's phase and ``W``
        itself, ``W`` the quadrature weights over the revolution's window of samples
        (read in place from ``data``, whose first sample is record index ``base``)."""
        work = data.dtype.type
        nr = na.size - 1
        n_o = self.orders.size
        L = np.diff(na)
        Lw = L + 2  # the window: one sample before and the first sample after
        stride = int(Lw.max()) + 1  # > every window: the row sums' index pairs
        if self._ii.size < stride or self._ii.dtype != work:
            self._ii = np.arange(max(stride, 2 * self._ii.size), dtype=work)
        ii = self._ii[:stride]  # window positions 0, 1, ...
        # rows x revolutions x window: each row's grid is contiguous (fast element-wise
        # work); VT[:, r, :lw] is revolution r's (rows x window) matrix for BLAS
        VT = self._work("grid", (2 * n_o + 1, nr, stride), work)
        W = VT[2 * n_o]  # order 0: the weights themselves
        ph = self._work("ph", (nr, stride), work)
        kern.weights_and_phase(A, ends, L, ii, self._base_order, W, ph)
        self._exponentials(ph, W, VT)
        kern.window_products(VT, data, na[:-1] - 1 - base, Lw, core, quad)

    def _exponentials(self, ph: np.ndarray, W: np.ndarray, VT: np.ndarray) -> None:
        """Rows ``2 i`` and ``2 i + 1`` of ``VT``: ``W cos`` and ``W sin`` of each order's
        phase (:func:`~rundash.dsp.order_kernels.exponentials`)."""
        kern.exponentials(ph, W, VT, self.orders, self._base_order, self._powers, self._work)


def track_orders(x, fs: float, profile: SpeedProfile, *, orders=(1, 2, 3, 4),
                 revs_per_block: int = 1, start_index: int = 0, direct="both") -> OrderTrack:
    """Computed order tracking of one or more channels.

    Parameters
    ----------
    x : array_like, shape (n_channels, n_samples) or (n_samples,)
        Channels sharing one time base, in engineering units.
    fs : float
        Sample rate in Hz.
    profile : SpeedProfile
        Speed profile of the record (:func:`rundash.dsp.speed_profile`).
    orders : sequence of float
        Orders to track, e.g. ``(1, 2)``; half orders need an even ``revs_per_block``.
    revs_per_block : int
        Whole revolutions per block.
    start_index : int
        Record index of the first sample of ``x`` (its time is ``start_index / fs``).
    direct : str or sequence of str
        The direct levels to compute (see :class:`OrderTracker`).

    Returns
    -------
    OrderTrack
        Only whole blocks fully inside the samples are returned.

    Examples
    --------
    >>> import numpy as np
    >>> from rundash.dsp import speed_profile
    >>> from rundash.conventions import lag_deg_from_phasor
    >>> fs = 5000.0
    >>> t = np.arange(int(fs)) / fs
    >>> prof = speed_profile(np.arange(51) / 50.0)            # 3000 rpm
    >>> x = 2.0 * np.cos(2 * np.pi * 50.0 * t - np.radians(30.0))
    >>> tr = track_orders(x, fs, prof, orders=(1,))
    >>> c = tr.vectors[0, 0, 10]
    >>> round(float(abs(c)), 6), round(float(lag_deg_from_phasor(c)), 4)
    (2.0, 30.0)
    """
    x = np.asarray(x)
    if x.ndim == 1:
        x = x[None, :]
    if x.ndim != 2:
        raise DspError(invalid_value("x", f"array of shape {x.shape}",
                                     "shape (n_channels, n_samples)"))
    tracker = OrderTracker(profile, fs, x.shape[0], orders=orders, revs_per_block=revs_per_block,
                           direct=direct)
    parts = []
    for a in range(0, x.shape[1], CHUNK_SAMPLES):
        parts.extend(tracker._parts(x[:, a:a + CHUNK_SAMPLES], start_index + a))
    parts.append(tracker.finish())
    return concat_tracks(parts)
