"""Tests of rundash.dsp.vold_kalman.

References: the amplitude response of the second-order Vold–Kalman filter at constant
speed, H(df) = 1 / (1 + r^2 (2 sin(pi df / fs))^4) (the minimiser of the criterion in
the module doc, as given by Tůma 2005 and Pan & Lin 2006, from memory), and the known
amplitudes and phases of synthetic tones.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from rundash.conventions import lag_deg_from_phasor
from rundash.dsp import speed_profile, track_orders, vold_kalman, vold_kalman_at
from rundash.errors import DspError
from tests import synth

FS = 2000.0


def _steady(n):
    return slice(n // 4, 3 * n // 4)


def test_two_orders_five_percent_apart_are_separated():
    # Requirement: two orders 5 % apart in frequency, each amplitude within 2 % in steady
    # state. 3000 rpm: 50 Hz and 52.5 Hz, bandwidth 0.5 Hz, SNR 40 dB on the first.
    t = np.arange(int(20 * FS)) / FS
    theta = 50.0 * t
    rng = np.random.default_rng(0)
    x = synth.probe_signal(theta, 1.0, 17.0, harmonics=[(1.05, 0.5, 57.0)], rng=rng,
                           snr_db=40.0)
    res = vold_kalman(x, FS, np.full(t.size, 3000.0), [1.0, 1.05], bandwidth_hz=0.5)
    sl = _steady(res.time_s.size)
    a = np.abs(res.envelopes[:, sl])
    assert np.max(np.abs(a[0] - 1.0)) < 0.02 and np.max(np.abs(a[1] / 0.5 - 1.0)) < 0.02
    lag = lag_deg_from_phasor(res.envelopes[:, sl])
    assert np.max(np.abs(lag[0] - 17.0)) < 2.0 and np.max(np.abs(lag[1] - 57.0)) < 2.0
    # one order alone, the other beats through it (why the joint solve matters) ...
    alone = vold_kalman(x, FS, np.full(t.size, 3000.0), [1.0], bandwidth_hz=5.0)
    assert np.max(np.abs(np.abs(alone.envelopes[0, sl]) - 1.0)) > 0.1
    # ... while jointly, even with the same wide bandwidth, they stay apart
    joint = vold_kalman(x, FS, np.full(t.size, 3000.0), [1.0, 1.05], bandwidth_hz=5.0)
    assert np.max(np.abs(np.abs(joint.envelopes[0, sl]) - 1.0)) < 0.02


@pytest.mark.parametrize("bw", [0.5, 2.0])
def test_bandwidth_matches_closed_form_response(bw):
    # A tone bw/2 off the tracked order: steady envelope amplitude = H(bw/2) = 1/sqrt(2)
    # by the choice of r (module doc); at 2 bw off: H = 1 / (1 + (sqrt 2 - 1) (sin(pi 2bw
    # / fs_d) / sin(pi bw / 2 / fs_d))^4). Tolerance 1 % (end effects excluded).
    t = np.arange(int(40 * FS)) / FS
    f_rot = 25.0
    for df in (bw / 2, 2 * bw):
        x = np.cos(2 * np.pi * (f_rot + df) * t)
        res = vold_kalman(x, FS, np.full(t.size, 1500.0), [1.0], bandwidth_hz=bw)
        s_half = np.sin(np.pi * bw / 2 / res.fs_out)
        s_df = np.sin(np.pi * df / res.fs_out)
        h = 1.0 / (1.0 + (np.sqrt(2) - 1) * (s_df / s_half) ** 4)
        sl = _steady(res.time_s.size)
        assert_allclose(np.abs(res.envelopes[0, sl]), h, rtol=0.01, atol=1e-3)


def test_profile_input_agrees_with_order_tracking():
    # On a run-up the envelope of 1X follows the same phasor as the order track
    # (same convention, conventions.py); amplitude ramps 1 -> 2 slowly.
    sweep = synth.linear_sweep(600.0, 150.0, 16.0)
    t = np.arange(int(sweep.duration_s * FS)) / FS
    theta = sweep.theta(t)
    amp = 1.0 + t / t[-1]
    x = amp * np.cos(2 * np.pi * theta - np.radians(75.0))
    prof = speed_profile(sweep.rev_times())
    res = vold_kalman(x, FS, prof, [1.0], bandwidth_orders=0.2)
    tr = track_orders(x, FS, prof, orders=(1,))
    sl = _steady(res.time_s.size)
    c_vk = res.envelopes[0, sl]
    c_ot = np.interp(res.time_s[sl], tr.time_s, tr.vectors[0, 0].real) + 1j * np.interp(
        res.time_s[sl], tr.time_s, tr.vectors[0, 0].imag)
    assert_allclose(np.abs(c_vk), np.abs(c_ot), rtol=0.02)
    assert np.max(np.abs((lag_deg_from_phasor(c_vk) - 75.0 + 180) % 360 - 180)) < 2.0
    assert_allclose(res.speed_rpm[sl], prof.rpm(res.time_s[sl]), rtol=1e-9)


class TestValidation:
    def test_bandwidth_too_narrow_without_decimation(self):
        t = np.arange(20000) / FS
        with pytest.raises(DspError, match="cannot be honoured"):
            vold_kalman(np.cos(2 * np.pi * 25 * t), FS, np.full(t.size, 1500.0), [1.0],
                        bandwidth_hz=0.01, decimate=1)

    def test_bandwidth_above_nyquist(self):
        t = np.arange(20000) / FS
        with pytest.raises(DspError, match="below half the decimated rate"):
            vold_kalman(np.cos(2 * np.pi * 25 * t), FS, np.full(t.size, 1500.0), [1.0],
                        bandwidth_hz=200.0)

    def test_order_above_flat_band(self):
        t = np.arange(20000) / FS
        with pytest.raises(DspError, match="above the flat band"):
            vold_kalman(np.cos(2 * np.pi * 25 * t), FS, np.full(t.size, 1500.0), [1.0],
                        bandwidth_hz=1.0, decimate=40)

    @pytest.mark.parametrize("kw, match", [
        ({"bandwidth_hz": -1.0}, "Invalid value for 'bandwidth_hz'"),
        ({"bandwidth_hz": 1.0, "bandwidth_orders": 0.1}, "Invalid value for 'bandwidth_orders'"),
        ({"decimate": 0}, "Invalid value for 'decimate'"),
    ])
    def test_options(self, kw, match):
        t = np.arange(2000) / FS
        with pytest.raises(DspError, match=match):
            vold_kalman(np.cos(t), FS, np.full(t.size, 1500.0), [1.0], **kw)

    def test_speed_shape(self):
        with pytest.raises(DspError, match="Invalid value for 'speed'"):
            vold_kalman(np.zeros(100), FS, np.zeros(50), [1.0])


def test_long_record_in_pieces_separates_close_orders():
    # 1X (2.0, lag 0.7 rad) and a 1.05X neighbour (0.5) on a 600 -> 4200 rpm run-up over
    # 60 s: the per-revolution DFT of computed order tracking cannot tell orders 0.05
    # apart within one revolution and reads the 1X off by up to the neighbour's amplitude;
    # the Vold-Kalman filter of both orders jointly, in 10 s pieces, reads it within 1 %
    # and 0.01 rad (the signal is the reference: a known sum of two order components)
    fs = 4000.0
    t = np.arange(int(60 * fs)) / fs
    theta = (600.0 * t + 0.5 * 60.0 * t * t) / 60.0
    te = np.interp(np.arange(1, int(theta[-1])), theta, t)
    prof = speed_profile(te)
    x = 2.0 * np.cos(2 * np.pi * theta - 0.7) + 0.5 * np.cos(2 * np.pi * 1.05 * theta + 0.2)
    tr = track_orders(x[None, :], fs, prof, orders=(1.0,))
    inner = slice(100, -100)
    dft_err = np.max(np.abs(np.abs(tr.vectors[0, 0, inner]) - 2.0))
    env = vold_kalman_at(x, fs, prof, [1.0, 1.05], tr.time_s, piece_s=10.0)
    assert dft_err > 0.3
    assert np.max(np.abs(np.abs(env[0, inner]) - 2.0)) < 0.02
    assert np.max(np.abs(np.angle(env[0, inner]) + 0.7)) < 0.01
    assert np.max(np.abs(np.abs(env[1, inner]) - 0.5)) < 0.02
