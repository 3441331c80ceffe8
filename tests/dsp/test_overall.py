"""Band-limited overall velocity (rundash/dsp/overall.py) against closed forms and scipy.

References:
- the band itself, 10–1000 Hz and 2–1000 Hz below 600 rpm rated: ISO 10816-1 / 20816-1
  (from memory, not checked against the standard's text);
- the gain of a digital Butterworth band-pass (or high-pass) obtained by the bilinear
  transform with pre-warped edges, in closed form: |H|^2 = 1 / (1 + ((W^2 - W0^2) /
  (W B))^(2N)), W = 2 fs tan(pi f / fs), W0^2 = W1 W2, B = W2 - W1 (high-pass:
  1 / (1 + (W1 / W)^(2N))) — S. Butterworth's maximally flat response with the
  low-pass-to-band-pass substitution and the bilinear transform, A. V. Oppenheim and
  R. W. Schafer, Discrete-Time Signal Processing, 3rd ed. (2010), ch. 7 (section numbers
  from memory);
- the rms of a sampled sine over whole periods of the sampling (N f / fs a whole number,
  2 f / fs not): exactly A / sqrt(2) (the sum of cos(4 pi f n / fs) over such N is zero);
- streaming against scipy.signal.sosfilt on the whole record in one call.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

from rundash.dsp import overall
from rundash.dsp.orders import OrderTracker, first_samples
from rundash.dsp.speed import speed_profile
from rundash.errors import DspError

FS = 10000.0
REV_S = 0.02  # 3000 rpm: 200 samples per revolution exactly


def butterworth_gain(f_hz, band: overall.OverallBand, fs: float, n: int = overall.BAND_ORDER):
    """Closed-form |H(f)| of the bilinear-transform Butterworth filter (module docstring)."""
    w = 2 * fs * np.tan(np.pi * np.asarray(f_hz, float) / fs)
    w1 = 2 * fs * np.tan(np.pi * band.lo_hz / fs)
    if not band.low_pass:
        return 1.0 / np.sqrt(1.0 + (w1 / w) ** (2 * n))
    w2 = 2 * fs * np.tan(np.pi * band.hi_hz / fs)
    x = (w * w - w1 * w2) / (w * (w2 - w1))
    return 1.0 / np.sqrt(1.0 + x ** (2 * n))


def _constant_speed(seconds: float, fs: float = FS):
    # events half a sample after a sample: every revolution holds REV_S * fs samples
    n_rev = int(round(seconds / REV_S))
    prof = speed_profile((np.arange(n_rev) * REV_S * fs + 0.5) / fs)
    t = np.arange(int(round(seconds * fs))) / fs
    return prof, t


def _fed(x, prof, fs, band, chunk=7001, R=1):
    ov = overall.BandOverall(band, prof, fs, x.shape[0], revs_per_block=R)
    for a in range(0, x.shape[1], chunk):
        ov.feed(x[:, a:a + chunk], a)
    return ov


class TestBand:
    def test_iso_band_by_rated_speed(self):
        # ISO 10816-1 / 20816-1 (from memory): 2 Hz lower edge below 600 rpm rated
        assert overall.velocity_band(25600.0, rated_speed_rpm=3600.0).label() == "10-1000 Hz"
        assert overall.velocity_band(25600.0, rated_speed_rpm=600.0).label() == "10-1000 Hz"
        slow = overall.velocity_band(25600.0, rated_speed_rpm=599.0)
        assert (slow.lo_hz, slow.hi_hz, slow.low_pass) == (2.0, 1000.0, True)
        assert "below 600 rpm" in slow.basis and "from memory" in slow.basis

    def test_upper_edge_beyond_the_sample_rate_is_said(self):
        b = overall.velocity_band(1500.0, rated_speed_rpm=3000.0)
        assert b.applied and not b.low_pass and b.hi_hz == 750.0
        assert "750" in b.note and "1000" in b.note and b.label() == "10-750 Hz"
        # 0.9 x Nyquist is the boundary (our own choice): 1000 Hz at fs 2222 Hz keeps it
        assert overall.velocity_band(2300.0, rated_speed_rpm=3000.0).low_pass
        assert not overall.velocity_band(2200.0, rated_speed_rpm=3000.0).low_pass

    def test_no_band_when_even_the_lower_edge_cannot_be_kept(self):
        b = overall.velocity_band(20.0, rated_speed_rpm=3000.0)
        assert not b.applied and "as recorded" in b.note
        with pytest.raises(DspError, match="band"):
            overall.band_sos(b, 20.0)


class TestGainAgainstTheClosedForm:
    band = overall.velocity_band(FS, rated_speed_rpm=3000.0)

    @pytest.mark.parametrize("f_hz", [50.0, 100.0, 1000.0, 2500.0])
    def test_per_revolution_rms_of_a_sine(self, f_hz):
        # whole sampled periods in each 200-sample revolution: rms exactly g A / sqrt(2);
        # after 1 s the filter's start (a step of the state) has decayed below 1e-9
        prof, t = _constant_speed(3.0)
        A = 2.0
        x = (A * np.sin(2 * np.pi * f_hz * t + 0.3))[None]
        rms = _fed(x, prof, FS, self.band).rms()[0, 50:]
        g = butterworth_gain(f_hz, self.band, FS)
        np.testing.assert_allclose(rms, g * A / np.sqrt(2), rtol=1e-6)
        if f_hz == 1000.0:  # -3 dB at the edge: the edges are pre-warped (closed form)
            assert g == pytest.approx(1 / np.sqrt(2), rel=1e-12)

    @pytest.mark.parametrize("f_hz", [2.0, 3.0, 5.0])
    def test_rms_below_the_band_over_whole_periods(self, f_hz):
        # a 3 Hz sine does not fill whole periods in one revolution: the rms over 50
        # revolutions (1 s: whole periods of every f here) is g A / sqrt(2)
        prof, t = _constant_speed(6.0)
        A = 5.0
        x = (A * np.sin(2 * np.pi * f_hz * t))[None]
        rms = _fed(x, prof, FS, self.band).rms()[0, 100:250]  # seconds 2 to 5
        got = np.sqrt(np.mean(rms ** 2))
        g = butterworth_gain(f_hz, self.band, FS)
        assert got == pytest.approx(g * A / np.sqrt(2), rel=1e-3)
        if f_hz <= 3.0:  # 2 Hz and 3 Hz attenuated by 40 dB and more
            assert got < 0.01 * A / np.sqrt(2)

    def test_dc_is_removed_from_the_start(self):
        # the state starts as the steady state of the first sample: an offset does not
        # ring (sosfilt_zi; a band-pass passes no DC)
        prof, t = _constant_speed(2.0)
        x = np.vstack([np.full(t.size, 5.0),
                       5.0 + 2.0 * np.sin(2 * np.pi * 100.0 * t)])
        rms = _fed(x, prof, FS, self.band).rms()
        assert np.max(rms[0]) < 1e-9
        g = butterworth_gain(100.0, self.band, FS)
        np.testing.assert_allclose(rms[1, 50:], g * 2.0 / np.sqrt(2), rtol=1e-6)

    def test_high_pass_only_when_fs_limits_the_band(self):
        fs = 1500.0
        band = overall.velocity_band(fs, rated_speed_rpm=3000.0)
        prof, t = _constant_speed(3.0, fs)  # 30 samples per revolution
        x = (2.0 * np.sin(2 * np.pi * 700.0 * t))[None]  # 700 Hz: 14 cycles in 30 samples
        rms = _fed(x, prof, fs, band).rms()[0, 50:]
        g = butterworth_gain(700.0, band, fs)
        assert g > 0.999
        np.testing.assert_allclose(rms, g * 2.0 / np.sqrt(2), rtol=1e-6)


class TestStreaming:
    def test_chunks_equal_one_scipy_call_and_the_tracker_blocks(self):
        # a run-up with noise: the per-block rms of the chunked filter equals that of
        # scipy.signal.sosfilt over the whole record (same state at the start), over the
        # order tracker's own block boundaries
        rng = np.random.default_rng(4)
        t_rev = np.cumsum(60.0 / np.linspace(600.0, 3000.0, 300))
        t_rev = np.concatenate([[0.01], 0.01 + t_rev])
        prof = speed_profile(t_rev)
        n = int(t_rev[-1] * FS) + 50
        x = rng.normal(size=(2, n)) + np.array([[3.0], [-1.0]])
        band = overall.velocity_band(FS, rated_speed_rpm=3000.0)
        for R in (1, 3):
            ov = _fed(x, prof, FS, band, chunk=4093, R=R)
            sos = overall.band_sos(band, FS)
            zi = signal.sosfilt_zi(sos)[:, None, :] * x[:, 0][None, :, None]
            y, _ = signal.sosfilt(sos, x, axis=-1, zi=zi)
            starts = first_samples(t_rev[0:(prof.n_revs // R) * R + 1:R], FS)
            ref = np.array([[np.sqrt(np.mean(y[c, a:b] ** 2)) for a, b in
                             zip(starts[:-1], starts[1:])] for c in range(2)])
            np.testing.assert_allclose(ov.rms(), ref, rtol=1e-9)
            # the tracker's direct rms of the filtered record, block by block, is the same
            tr = OrderTracker(prof, FS, 2, revs_per_block=R)
            got = tr.feed(y, 0)
            np.testing.assert_allclose(ov.rms(got.rev_index // R), got.direct_rms, rtol=1e-9)

    def test_chunks_must_be_consecutive(self):
        prof, t = _constant_speed(1.0)
        ov = overall.BandOverall(overall.velocity_band(FS, rated_speed_rpm=3000.0), prof,
                                 FS, 1)
        ov.feed(np.zeros((1, 100)), 0)
        with pytest.raises(DspError, match="consecutive"):
            ov.feed(np.zeros((1, 100)), 150)
