"""Tests of rundash.dsp.spectra (cascade).

Reference: scipy.fft.rfft of the windowed frame (scipy as the reference library) and the
amplitude scaling 2 |X_k| / sum(w), which gives the peak amplitude of a sinusoid centred
on a bin (common practice, no source); flat-top windows read within about 0.02 dB off
bin (scipy.signal.windows.flattop documentation: HFT-type window, from memory).
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.fft import rfft
from scipy.signal import get_window

from rundash.dsp import cascade, cascade_plan, cascade_rows, speed_profile
from rundash.errors import DspError
from tests import synth

FS = 4096.0


def _record(duration=30.0):
    sweep = synth.linear_sweep(600.0, 200.0, duration)  # 600 -> 6600 rpm
    t = np.arange(int(duration * FS)) / FS
    x = synth.probe_signal(sweep.theta(t), 2.0, 30.0, harmonics=[(2, 0.5, 0.0)])
    return sweep, speed_profile(sweep.rev_times()), x


def test_rows_match_scipy_rfft():
    _, prof, x = _record()
    cs = cascade(x, FS, prof, n_fft=1024, max_order=None, max_bins=4096)
    w = get_window("hann", 1024)
    i = cs.time_s.size // 2
    first = int(round(cs.time_s[i] * FS)) - 512
    frame = x[first:first + 1024] - x[first:first + 1024].mean()
    ref = np.abs(rfft(frame * w)) * 2 / w.sum()
    assert_allclose(cs.amplitude_peak[i], ref, rtol=1e-5, atol=1e-6)  # float32 result


def test_size_limits_and_1x_ridge():
    sweep, prof, x = _record()
    cs = cascade(x, FS, prof, speed_step_rpm=10.0, n_fft=2048, window="flattop")
    assert cs.amplitude_peak.shape[0] <= 200 and cs.freq_hz.size <= 1024
    assert cs.amplitude_peak.dtype == np.float32
    assert np.all(np.diff(cs.speed_rpm) > 0)
    # peak near 1X in every row reads 2.0 within the flat-top's flatness plus the smear
    # of a 0.5 s window over a 200 rpm/s sweep (1.7 Hz, under a bin of 2 Hz): 1 %
    for row, rpm in zip(cs.amplitude_peak, cs.speed_rpm):
        near = np.abs(cs.freq_hz - rpm / 60.0) < 8.0
        assert abs(row[near].max() - 2.0) < 0.02
    assert cs.freq_hz[-1] <= 10 * 6600 / 60.0 + 10.0


def test_chunked_rows_equal_whole():
    _, prof, x = _record(10.0)
    times, _ = cascade_plan(prof, speed_step_rpm=50.0, margin_s=0.25)
    done, f, whole = cascade_rows(x, FS, 0, times, n_fft=1024, f_max_hz=500.0)
    assert done.all()
    half = x.size // 2
    d1, _, a1 = cascade_rows(x[:half], FS, 0, times, n_fft=1024, f_max_hz=500.0)
    d2, _, a2 = cascade_rows(x[half - 1024:], FS, half - 1024, times, n_fft=1024,
                             f_max_hz=500.0)
    assert (d1 | d2).all()
    combined = np.where(d1[:, None], a1, a2)
    assert_allclose(combined, whole, rtol=1e-6)


def test_several_channels_at_once_equal_each_alone():
    # the pipeline passes all probes of a chunk in one call: each channel's rows are the
    # same numbers as when it is passed alone
    _, prof, x = _record(10.0)
    block = np.stack([x, 0.5 * x[::-1], np.roll(x, 300)]).astype(np.float32)
    times, _ = cascade_plan(prof, speed_step_rpm=50.0, margin_s=0.25)
    done, f, amp = cascade_rows(block, FS, 0, times, n_fft=1024, f_max_hz=500.0, max_bins=64)
    assert amp.shape == (3, times.size, f.size) and done.all()
    for k in range(3):
        d1, f1, a1 = cascade_rows(block[k], FS, 0, times, n_fft=1024, f_max_hz=500.0,
                                  max_bins=64)
        np.testing.assert_array_equal(d1, done)
        np.testing.assert_array_equal(f1, f)
        np.testing.assert_array_equal(a1, amp[k])


def test_bad_options():
    _, prof, x = _record(5.0)
    with pytest.raises(DspError, match="Invalid value for 'window'"):
        cascade(x, FS, prof, window="kaiser")
    with pytest.raises(DspError, match="Invalid value for 'speed_step_rpm'"):
        cascade(x, FS, prof, speed_step_rpm=0.0)
    with pytest.raises(DspError, match="Invalid value for 'n_fft'"):
        cascade(x, FS, prof, n_fft=8)


class TestPlanIgnoresJitter:
    def test_slow_run_up_through_a_jittery_tach_gets_a_row_per_step(self):
        # 0.7 rpm/s for 54 minutes (600 -> 2868 rpm, closed-form linear sweep), events
        # quantised to a 5 kHz sample grid and interpolated as measured (fit="never"):
        # per-revolution speeds jitter by up to 0.8 %, which summed over 94 000
        # revolutions is far more than the 2268 rpm travelled. Rows every 50 rpm:
        # 2268 / 50 = 45 steps, 46 rows.
        sw = synth.linear_sweep(600.0, 0.7, 54 * 60.0)
        rt = (np.floor(sw.rev_times() * 5000.0 + 0.37) + 0.5 - 0.37) / 5000.0
        prof = speed_profile(rt, fit="never")
        per_rev = 60.0 / np.diff(rt)
        assert np.sum(np.abs(np.diff(per_rev))) > 100 * 2268.0
        times, rpm = cascade_plan(prof, speed_step_rpm=50.0, max_rows=200)
        assert times.size == pytest.approx(46, abs=1)
        # rows a step apart, give or take the speed error of a 0.1 s stretch: the angle at
        # each end is off by the jitter, 0.29 samples x 16.7 rev/s / 5 kHz = 1e-3 rev at
        # 1000 rpm, so 60 x sqrt(2) x 1e-3 / 0.1 = 0.8 rpm rms; 5 rpm
        assert np.all((np.diff(rpm) >= 50.0) & (np.diff(rpm) < 55.0))

    def test_hold_gives_one_row(self):
        rt = (np.floor(np.arange(3001) * 0.02 * 5000.0 + 0.37) + 0.5 - 0.37) / 5000.0
        rt = rt + 3e-5 * np.random.default_rng(0).standard_normal(rt.size)
        times, _ = cascade_plan(speed_profile(rt, fit="never"))
        assert times.size == 1
