"""Cascade: a spectrum per speed step, compact enough to draw fast.

Rows are placed where the speed has moved by ``speed_step_rpm`` since the previous row
(in time order, so mixed runs get rows on the way up and down). Each row is the
amplitude spectrum of ``n_fft`` samples centred on the row's time, scaled so that a
sinusoid of peak amplitude A at a bin centre shows A (``2 |X_k| / sum(w)``); with the
Hann window a sinusoid between bins reads up to 1.42 dB (15 %) low, with ``'flattop'``
within about 0.02 dB. Bins above ``max_order`` times the top rotation frequency are
dropped, and the rest are reduced to at most ``max_bins`` by keeping the maximum of
each group of neighbouring bins (a peak-hold, so peaks keep their height).

Chunk-friendly use: :func:`cascade_plan` gives the row times from the speed profile
alone; :func:`cascade_rows` computes the rows whose windows lie inside a given block of
samples, so the pipeline can pass only the ``n_fft`` samples around each row (or
consecutive chunks) instead of the whole record; :func:`cascade` does both for a record
in memory.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from typing import Literal

import numpy as np
from scipy.fft import rfft, rfftfreq

from rundash.dsp.speed import SpeedProfile
from rundash.errors import DspError, invalid_value

__all__ = ["Cascade", "cascade", "cascade_plan", "cascade_rows"]

Window = Literal["hann", "flattop", "boxcar"]
_WINDOWS = ("hann", "flattop", "boxcar")
# threads of one FFT call over many rows (pocketfft runs them without the interpreter lock)
_FFT_WORKERS = 2


@dataclass(frozen=True)
class Cascade:
    """Spectra per speed step.

    Attributes
    ----------
    speed_rpm : ndarray, shape (n_rows,)
    time_s : ndarray, shape (n_rows,)
        Centre time in s of each row's window.
    freq_hz : ndarray, shape (n_freq,)
    amplitude_peak : ndarray of float32, shape (n_rows, n_freq)
        Peak amplitude in the channel's units.
    """

    speed_rpm: np.ndarray
    time_s: np.ndarray
    freq_hz: np.ndarray
    amplitude_peak: np.ndarray


def cascade_plan(profile: SpeedProfile, *, speed_step_rpm: float = 50.0,
                 max_rows: int = 200, margin_s: float = 0.0,
                 resolution_s: float = 0.1) -> tuple[np.ndarray, np.ndarray]:
    """Row times (s) and speeds (rpm): a row each time the speed has moved by a step.

    Speeds are the mean speeds over consecutive stretches of ``resolution_s`` (the shaft
    angle turned, from the speed profile, over the stretch's duration), so the timing
    jitter of single revolutions never counts as speed travel. The step is widened when
    needed so that there are at most ``max_rows`` rows; the travel it is sized from is
    the speed's total variation counted in moves of at least a tenth of a step or five
    times the scatter of the stretch speeds, whichever is larger (a dead band: jitter
    and a controller's hunting inside it add nothing). Only times at least
    ``margin_s`` from the profile's ends are used (half a spectrum window keeps every
    row's window inside the record).
    """
    if not (np.isfinite(speed_step_rpm) and speed_step_rpm > 0):
        raise DspError(invalid_value("speed_step_rpm", speed_step_rpm, "a positive step in rpm"))
    if isinstance(max_rows, bool) or int(max_rows) != max_rows or max_rows < 1:
        raise DspError(invalid_value("max_rows", max_rows, "an integer >= 1"))
    if not (np.isfinite(resolution_s) and resolution_s > 0):
        raise DspError(invalid_value("resolution_s", resolution_s, "a positive time in s"))
    t0, t1 = profile.t_start + margin_s, profile.t_end - margin_s
    if t1 <= t0:
        return np.empty(0), np.empty(0)
    n = max(1, int(np.floor((t1 - t0) / resolution_s)))
    edges = np.linspace(t0, t0 + n * resolution_s, n + 1) if n * resolution_s <= t1 - t0 \
        else np.linspace(t0, t1, n + 1)
    theta = profile.angle_rev(edges)
    tm = 0.5 * (edges[:-1] + edges[1:])
    rpm = 60.0 * np.diff(theta) / np.diff(edges)
    ok = np.isfinite(rpm)
    tm, rpm = tm[ok], rpm[ok]
    if tm.size == 0:
        return np.empty(0), np.empty(0)
    # dead band: a tenth of a step, or five times the scatter of the stretch speeds
    # (second differences of white scatter have variance 6 sigma^2), whichever is larger
    scatter = 1.4826 * float(np.median(np.abs(np.diff(rpm, 2)))) / np.sqrt(6.0) \
        if rpm.size > 2 else 0.0
    travel = _travel(rpm, max(0.1 * float(speed_step_rpm), 5.0 * scatter))
    step = max(float(speed_step_rpm), travel / max(int(max_rows) - 1, 1) * 1.0001)
    rows = [0]
    last = rpm[0]
    for i in range(1, rpm.size):
        if abs(rpm[i] - last) >= step:
            rows.append(int(i))
            last = rpm[i]
    rows = np.asarray(rows[:max_rows])
    return tm[rows], rpm[rows]


def _travel(rpm: np.ndarray, dead_band: float) -> float:
    """Total variation of ``rpm`` counted in moves of at least ``dead_band``."""
    total, last = 0.0, float(rpm[0])
    for r in rpm[1:]:
        d = abs(float(r) - last)
        if d >= dead_band:
            total += d
            last = float(r)
    return total


def _check_window(window, n_fft):
    if window not in _WINDOWS:
        raise DspError(invalid_value("window", window, ", ".join(repr(w) for w in _WINDOWS)))
    if isinstance(n_fft, bool) or int(n_fft) != n_fft or n_fft < 16:
        raise DspError(invalid_value("n_fft", n_fft, "an integer >= 16"))
    return _window(window, int(n_fft))


@lru_cache(maxsize=16)
def _window(window: str, n_fft: int) -> np.ndarray:
    """The window of ``n_fft`` samples, computed once per kind and length (the pipeline
    asks for the same one for every row of every channel), read-only."""
    if window == "hann":  # periodic; the sum scipy.signal.get_window forms (tested)
        w = 0.5 + 0.5 * np.cos(np.linspace(-np.pi, np.pi, n_fft + 1)[:-1])
    elif window == "boxcar":
        w = np.ones(n_fft)
    else:
        from scipy.signal import get_window  # here: scipy.signal is slow to import

        w = get_window(window, n_fft, fftbins=True)
    w.flags.writeable = False
    return w


@lru_cache(maxsize=16)
def _bins(fs: float, n_fft: int, f_max_hz: float | None, max_bins: int):
    """The rfft bins, how many are kept, their grouping and the groups' first bins, and
    the groups' centre frequencies (read-only; the pipeline asks for the same every row)."""
    freq = rfftfreq(n_fft, 1.0 / fs)
    n_keep = freq.size if f_max_hz is None else int(np.searchsorted(freq, f_max_hz, "right"))
    n_keep = max(2, min(n_keep, freq.size))
    g = int(np.ceil(n_keep / max_bins))
    n_out = int(np.ceil(n_keep / g))
    f_out = freq[:n_keep]
    if g > 1:
        f_out = np.pad(f_out, (0, n_out * g - n_keep), mode="edge").reshape(n_out, g).mean(axis=1)
    f_out.flags.writeable = False
    return n_keep, g, n_out, np.arange(0, n_keep, g), f_out


def cascade_rows(x_block, fs: float, start_index: int, times_s, *, n_fft: int = 4096,
                 window: Window = "hann", f_max_hz: float | None = None,
                 max_bins: int = 1024) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Rows of a cascade whose windows lie inside a block of samples.

    Parameters
    ----------
    x_block : array_like, shape (n_samples,) or (n_channels, n_samples)
        One channel's samples, or several channels' sampled together; the first has
        record index ``start_index``.
    fs : float
        Sample rate in Hz.
    start_index : int
    times_s : array_like, shape (n_rows,)
        Row centre times in s (e.g. from :func:`cascade_plan`).
    n_fft, window, f_max_hz, max_bins
        As in :func:`cascade`; ``f_max_hz`` None keeps all bins up to fs / 2.

    Returns
    -------
    done : ndarray of bool, shape (n_rows,)
        Rows computed from this block.
    freq_hz : ndarray, shape (n_freq,)
    amplitude_peak : ndarray of float32, shape (n_rows, n_freq), or (n_channels, n_rows,
        n_freq) for several channels
        Zero for rows not computed here. Each channel's rows are the same numbers
        whether it is passed alone or with others.
    """
    x = np.asarray(x_block)
    if x.ndim not in (1, 2):
        raise DspError(invalid_value("x_block", f"array of shape {x.shape}",
                                     "a 1-D channel or a 2-D (channels, samples) block"))
    if not (np.isfinite(fs) and fs > 0):
        raise DspError(invalid_value("fs", fs, "a positive sample rate in Hz"))
    if isinstance(max_bins, bool) or int(max_bins) != max_bins or max_bins < 2:
        raise DspError(invalid_value("max_bins", max_bins, "an integer >= 2"))
    w = _check_window(window, n_fft)
    n_fft = int(n_fft)
    x2 = x[None] if x.ndim == 1 else x
    times = np.asarray(times_s, dtype=np.float64).ravel()
    n_keep, g, n_out, group_starts, f_out = _bins(float(fs), n_fft, f_max_hz, int(max_bins))
    first = np.round(times * fs).astype(np.int64) - n_fft // 2 - int(start_index)
    done = (first >= 0) & (first + n_fft <= x2.shape[1])
    amp = np.zeros((x2.shape[0], times.size, n_out), np.float32)
    idx = np.flatnonzero(done)
    if idx.size:
        # only the rows' samples, in float64 (a float32 record is not converted whole)
        frames = np.empty((x2.shape[0], idx.size, n_fft))
        for r, f0 in enumerate(first[idx].tolist()):
            frames[:, r] = x2[:, f0:f0 + n_fft]
        frames -= frames.mean(axis=2, keepdims=True)  # DC would only smear the first bins
        frames *= w
        spec = np.abs(rfft(frames, axis=2, workers=_FFT_WORKERS)[:, :, :n_keep])
        spec *= 2.0 / _window_sum(window, n_fft)
        # the largest bin of each group (the last group may be short)
        amp[:, idx] = np.maximum.reduceat(spec, group_starts, axis=2) if g > 1 else spec
    return done, f_out, (amp[0] if x.ndim == 1 else amp)


@lru_cache(maxsize=16)
def _window_sum(window: str, n_fft: int) -> float:
    return float(np.sum(_window(window, n_fft)))


def cascade(x, fs: float, profile: SpeedProfile, *, speed_step_rpm: float = 50.0,
            n_fft: int = 4096, max_order: float | None = 10.0, window: Window = "hann",
            max_rows: int = 200, max_bins: int = 1024) -> Cascade:
    """Cascade (spectra against speed) of one channel held in memory.

    Parameters
    ----------
    x : array_like, shape (n_samples,)
        One channel, first sample at t = 0.
    fs : float
        Sample rate in Hz.
    profile : SpeedProfile
    speed_step_rpm : float
        Speed change between rows (widened to keep at most ``max_rows`` rows).
    n_fft : int
        Samples per spectrum.
    max_order : float or None
        Highest frequency kept, as a multiple of the top rotation frequency (None: fs/2).
    window : {'hann', 'flattop', 'boxcar'}
    max_rows, max_bins : int
        Size limits of the result.

    Returns
    -------
    Cascade
        Rows whose window does not fit inside the record are left out.

    Examples
    --------
    >>> import numpy as np
    >>> from rundash.dsp import speed_profile
    >>> fs = 1024.0
    >>> prof = speed_profile(np.arange(0, 201) / 20.0)      # 1200 rpm for 10 s
    >>> t = np.arange(int(10 * fs)) / fs
    >>> cs = cascade(2.0 * np.cos(2 * np.pi * 20.0 * t), fs, prof, n_fft=1024)
    >>> float(np.round(cs.amplitude_peak.max(), 6))
    2.0
    """
    x = np.asarray(x, dtype=np.float64)
    if max_order is not None and not (np.isfinite(max_order) and max_order > 0):
        raise DspError(invalid_value("max_order", max_order, "a positive order or None"))
    times, rpm = cascade_plan(profile, speed_step_rpm=speed_step_rpm, max_rows=max_rows,
                              margin_s=0.5 * int(n_fft) / fs)
    top_hz = float(np.max(60.0 / np.diff(profile._t))) / 60.0
    f_max = None if max_order is None else min(max_order * top_hz, fs / 2)
    done, freq, amp = cascade_rows(x, fs, 0, times, n_fft=n_fft, window=window,
                                   f_max_hz=f_max, max_bins=max_bins)
    return Cascade(speed_rpm=rpm[done], time_s=times[done], freq_hz=freq,
                   amplitude_peak=amp[done])
