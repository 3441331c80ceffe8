"""Incremental tach and order tracking: the same dsp functions as the offline path, fed
a record that arrives in pieces (the live monitor, :mod:`rundash.workflows.live`).

tach (:class:`IncrementalTach`)
    Edges are re-detected with :func:`rundash.dsp.tach.detect_edges` on a sliding window
    (the last ``2 x level_window_s`` of the tach plus what arrived since), so the
    threshold follows the same block levels as offline; only edges older than a short
    guard are kept, each once. Every ``pulses_per_rev``-th edge is a once-per-rev event.
    Pulse repair is left to the offline processing (a missing pulse shows as a gap).
speed profile and vectors (:class:`IncrementalOrders`)
    When revolutions ``k .. m`` are followed by ``guard_revs`` more, a speed profile is
    built from the events ``k - context_revs`` onward and the samples of those
    revolutions are order-tracked with :func:`rundash.dsp.orders.track_orders`. A cubic
    spline's dependence on far knots decays by about 0.27 per knot, so with 4 guard and
    16 context revolutions the profile inside the block equals the whole-record profile
    to rounding (measured in tests/workflows/test_live.py).

Pure numpy: no I/O (see :mod:`rundash.conventions` for time and phase).
"""

from __future__ import annotations

import math
import warnings

import numpy as np

from rundash.dsp import orders as dsp_orders
from rundash.dsp import speed as dsp_speed
from rundash.dsp import tach as dsp_tach
from rundash.errors import DspError


# ----------------------------------------------------------------------------- tach
class IncrementalTach:
    """Once-per-rev events of a tach channel that arrives in pieces (see module doc).

    Parameters follow :func:`rundash.dsp.tach.detect_edges`; ``fs`` in Hz.
    """

    def __init__(self, fs: float, *, edge: str = "rising", threshold: float | None = None,
                 hysteresis: float | None = None, pulses_per_rev: int = 1,
                 level_window_s: float = 2.0, guard_s: float = 0.02,
                 min_step_s: float = 0.05, lost_after_revs: float = 4.0,
                 lost_after_min_s: float = 0.5):
        self.fs = float(fs)
        self.edge, self.threshold, self.hysteresis = edge, threshold, hysteresis
        self.ppr = int(pulses_per_rev)
        self.level_window_s = float(level_window_s)
        self.guard_s = max(float(guard_s), 4.0 / self.fs)
        self.min_step = int(min_step_s * self.fs)
        self.lost_after_revs = lost_after_revs
        self.lost_after_min_s = lost_after_min_s
        self._buf = np.empty(0, np.float32)
        self._buf_start = 0
        self._end = 0  # record index one past the last sample received
        self._detected_to = 0
        self._edges: list[float] = []
        self.notes: list[str] = []

    @property
    def rev_times(self) -> np.ndarray:
        """Once-per-rev event times in s found so far."""
        return np.asarray(self._edges[::self.ppr], dtype=np.float64)

    @property
    def time_s(self) -> float:
        """Record time in s of the end of the samples received."""
        return self._end / self.fs

    def feed(self, x, start_index: int) -> None:
        x = np.asarray(x, dtype=np.float32)
        if start_index != self._end:
            raise DspError(f"tach samples must be consecutive: got index {start_index}, "
                           f"expected {self._end}")
        self._buf = np.concatenate([self._buf, x]) if self._buf.size else x.copy()
        self._end += x.size

    def step(self, final: bool = False) -> int:
        """Detect edges in the window; return how many once-per-rev events are known."""
        n = self._buf.size
        if n < 3 or (not final and (self._end - self._detected_to < self.min_step
                                    or self._end < self.level_window_s * self.fs)):
            return len(self._edges) // self.ppr if self.ppr else 0
        with warnings.catch_warnings(record=True):
            warnings.simplefilter("always")
            e = dsp_tach.detect_edges(self._buf, self.fs, edge=self.edge,
                                      threshold=self.threshold, hysteresis=self.hysteresis,
                                      t0=self._buf_start / self.fs,
                                      level_window_s=self.level_window_s)
        if not final:
            e = e[e < self.time_s - self.guard_s]
        if self._edges:
            last = self._edges[-1]
            sep = 0.5 * (last - self._edges[-2]) if len(self._edges) > 1 else 2.0 / self.fs
            e = e[e > last + sep]
        self._edges.extend(float(v) for v in e)
        self._detected_to = self._end
        keep = int(2 * self.level_window_s * self.fs)
        if n > keep:
            self._buf = self._buf[n - keep:].copy()
            self._buf_start = self._end - keep
        return len(self._edges)

    def tach_ok(self) -> bool:
        """False when no edge came for longer than ``lost_after_revs`` pulse intervals
        (at least ``lost_after_min_s``), or none at all after the first level window."""
        now = self.time_s
        if not self._edges:
            return now <= 2.0 * self.level_window_s
        if len(self._edges) < 2:
            return now - self._edges[-1] <= max(self.lost_after_min_s, self.level_window_s)
        d = self._edges[-1] - self._edges[-2]
        return now - self._edges[-1] <= max(self.lost_after_min_s, self.lost_after_revs * d)


# ----------------------------------------------------------------------------- orders
class IncrementalOrders:
    """Order tracking of revolutions as they complete (see module doc)."""

    def __init__(self, fs: float, n_channels: int, *, orders=(1, 2, 3, 4),
                 revs_per_block: int = 1, guard_revs: int = 4, context_revs: int = 16):
        self.fs = float(fs)
        self.n_channels = int(n_channels)
        self.orders = tuple(float(o) for o in orders)
        self.R = int(revs_per_block)
        self.guard_revs = int(guard_revs)
        self.context_revs = int(context_revs)
        self._buf = np.empty((self.n_channels, 0), np.float32)
        self._buf_start = 0
        self._end = 0
        self.k_next = 0  # next block's first revolution

    def feed(self, x, start_index: int) -> None:
        x = np.asarray(x)
        if start_index != self._end:
            raise DspError(f"probe samples must be consecutive: got index {start_index}, "
                           f"expected {self._end}")
        self._buf = np.concatenate([self._buf, x], axis=1) if self._buf.shape[1] else x.copy()
        self._end += x.shape[1]

    def step(self, rev_times: np.ndarray, final: bool = False) -> dsp_orders.OrderTrack:
        """Blocks completed (and guarded) since the last call."""
        R, fs = self.R, self.fs
        empty = dsp_orders.OrderTrack.empty(self.n_channels, self.orders)
        K = rev_times.size - 1
        k_max = K if final else K - self.guard_revs
        # the last block needs samples past its end revolution
        while k_max > self.k_next and math.ceil(rev_times[k_max] * fs) + 2 > self._end:
            k_max -= 1
        nb = (k_max - self.k_next) // R
        if nb <= 0 or K < dsp_tach.MIN_REVOLUTIONS:
            return empty
        k_stop = self.k_next + nb * R
        k0 = max(0, self.k_next - self.context_revs) // R * R
        # the events as measured: a fit through their jitter needs the whole record (the
        # processing at the end makes it when the tach jitters)
        prof = dsp_speed.speed_profile(rev_times[k0:], fit="never")
        lo = max(self._buf_start, int(math.floor(rev_times[self.k_next] * fs)) - 1)
        hi = min(self._end, int(math.ceil(rev_times[k_stop] * fs)) + 2)
        x = self._buf[:, lo - self._buf_start:hi - self._buf_start]
        tr = dsp_orders.track_orders(x, fs, prof, orders=self.orders, revs_per_block=R,
                                     start_index=lo)
        ri = tr.rev_index + k0
        keep = (ri >= self.k_next) & (ri < k_stop)
        tr = dsp_orders.OrderTrack(
            time_s=tr.time_s[keep], speed_rpm=tr.speed_rpm[keep], orders=tr.orders,
            vectors=tr.vectors[:, :, keep], direct_pp=tr.direct_pp[:, keep],
            direct_rms=tr.direct_rms[:, keep], rev_index=ri[keep])
        self.k_next = k_stop
        cut = max(self._buf_start, int(math.floor(rev_times[self.k_next] * fs)) - 4)
        self._buf = self._buf[:, cut - self._buf_start:].copy()
        self._buf_start = cut
        return tr
