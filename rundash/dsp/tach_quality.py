"""Quality of a once-per-rev reference: how many sample intervals its edges span, how
much its event times jitter, and the warnings both give (:func:`tach_quality`).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np

from rundash.errors import TachQualityWarning

__all__ = ["edge_samples", "edge_spans", "timing_jitter", "local_jitter_s", "TachQuality",
           "tach_quality", "MIN_EDGE_SAMPLES", "MAX_JITTER_DEG"]


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
    than one sample, and quantised to the sample grid on a sharper edge (common
    practice, no source).

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
