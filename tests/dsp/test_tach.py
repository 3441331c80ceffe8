"""Tests of rundash.dsp.tach (edge detection and once-per-rev repair).

Reference: the true event times of the synthetic tach are the closed-form inverse of the
known angle (tests/synth.py). Its edges are linear ramps spanning several samples, so
linear interpolation of the threshold crossing is exact up to the curvature of theta(t)
within one sample (negligible here) and the error of the estimated threshold level
divided by the edge slope.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from numpy.testing import assert_allclose

from rundash.dsp import detect_edges, once_per_rev
from rundash.errors import TachError, TachQualityWarning
from tests import synth

FS = 20000.0


def _tach(sweep, pulses_per_rev=1, **kw):
    t = np.arange(int(sweep.duration_s * FS)) / FS
    return t, synth.tach_waveform(sweep.theta(t), pulses_per_rev, **kw)


def _true_events(sweep, pulses_per_rev=1, offset=0.0):
    """True event times within the sampled span [0, last sample]."""
    n = int(np.floor(sweep.theta(np.array(sweep.duration_s)) * pulses_per_rev))
    ev = sweep.time_at((np.arange(n + 1) + offset) / pulses_per_rev)
    return ev[ev <= (int(sweep.duration_s * FS) - 1) / FS]


class TestDetectEdges:
    def test_exact_on_linear_ramps(self):
        sweep = synth.linear_sweep(600.0, 500.0, 4.0)  # up to 2600 rpm
        _, v = _tach(sweep, ramp_rev=0.02)
        ev = detect_edges(v, FS, threshold=2.5, hysteresis=1.0)
        ref = _true_events(sweep)[1:]  # the event at t = 0 has no sample before it
        assert ev.size == ref.size
        assert_allclose(ev, ref, rtol=0, atol=1e-9)

    def test_dc_drift_of_a_proximity_tach(self):
        # 1.5 V slow drift (ramp + 0.1 Hz swing) under 5 V pulses: the level estimate per
        # 1 s window follows it. Linear interpolation between window centres misses a
        # sine of amplitude a by at most a (w h)^2 / 8 = 0.025 V here; over an edge
        # slope of 5 V per 0.04 rev that is 2e-4 rev: tolerance 1e-3 rev.
        sweep = synth.linear_sweep(300.0, 200.0, 12.0)
        t, v = _tach(sweep, ramp_rev=0.02)
        v = v + 1.0 * t / t[-1] + 0.5 * np.sin(2 * np.pi * 0.1 * t)
        ev = detect_edges(v.astype(np.float32), FS, level_window_s=1.0)
        ref = _true_events(sweep)[1:]
        assert ev.size == ref.size
        err_rev = (ev - ref) * sweep.rpm(ref) / 60.0
        assert np.max(np.abs(err_rev)) < 1e-3

    def test_fixed_threshold_fails_under_the_same_drift(self):
        # The reason for the running level estimate: a fixed mid threshold moves the
        # events by far more than the running estimate does.
        sweep = synth.linear_sweep(300.0, 200.0, 12.0)
        t, v = _tach(sweep, ramp_rev=0.02)
        v = v + 2.0 * t / t[-1]
        ref = _true_events(sweep)[1:]
        ev_fixed = detect_edges(v, FS, threshold=2.5)
        ev_auto = detect_edges(v, FS)
        err_auto = np.max(np.abs(ev_auto - ref) * sweep.rpm(ref) / 60.0)
        n = min(ev_fixed.size, ref.size)
        err_fixed = np.max(np.abs(ev_fixed[:n] - ref[:n]) * sweep.rpm(ref[:n]) / 60.0)
        assert err_auto < 1e-3 < err_fixed

    def test_falling_edge_and_inverted_polarity(self):
        sweep = synth.linear_sweep(1200.0, 300.0, 3.0)
        _, v = _tach(sweep, ramp_rev=0.02, duty=0.3)
        ref_fall = _true_events(sweep, offset=0.3)
        ev = detect_edges(v, FS, edge="falling")
        assert_allclose(ev, ref_fall[:ev.size], atol=1e-9)
        assert ev.size == ref_fall.size
        # a notch (low-going pulse): its rising edge is the pulse's falling edge
        ev_inv = detect_edges(5.0 - v, FS, edge="rising")
        assert_allclose(ev_inv, ev, atol=1e-9)

    def test_hysteresis_rejects_chatter(self):
        sweep = synth.linear_sweep(600.0, 0.0, 3.0)
        _, v = _tach(sweep, ramp_rev=0.05)
        rng = np.random.default_rng(2)
        v = v + 0.15 * rng.standard_normal(v.size)
        ref = _true_events(sweep)[1:]
        assert detect_edges(v, FS).size == ref.size
        assert detect_edges(v, FS, threshold=2.5, hysteresis=0.0).size > ref.size

    def test_pulses_per_rev(self):
        sweep = synth.linear_sweep(600.0, 400.0, 3.0)
        _, v = _tach(sweep, pulses_per_rev=8, ramp_rev=0.05)
        ev = detect_edges(v, FS)
        ref = _true_events(sweep, pulses_per_rev=8)[1:]
        assert_allclose(ev, ref, atol=1e-8)

    @pytest.mark.parametrize("kw, match", [
        ({"edge": "up"}, "Invalid value for 'edge': allowed 'rising' or 'falling', got 'up'"),
        ({"hysteresis": -1.0}, "Invalid value for 'hysteresis'"),
        ({"level_window_s": 0.0}, "Invalid value for 'level_window_s'"),
    ])
    def test_invalid_options(self, kw, match):
        with pytest.raises(TachError, match=match):
            detect_edges(np.zeros(100), 1000.0, **kw)

    def test_flat_channel_has_no_events(self):
        assert detect_edges(np.full(5000, 3.3), 1000.0).size == 0


class TestOncePerRev:
    def test_clean_events_pass_unchanged_without_warning(self):
        ref = _true_events(synth.linear_sweep(300.0, 500.0, 5.0))
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            opr = once_per_rev(ref)
        assert_allclose(opr.times_s, ref, rtol=0, atol=0)
        assert opr.n_missing_filled == opr.n_extra_removed == 0 and opr.notes == ()

    @pytest.mark.parametrize("sweep", [synth.linear_sweep(60.0, 2000.0, 6.0),
                                       synth.exp_coast_down(12000.0, 1.5, 6.0)],
                             ids=["hard-start-60rpm-2000rpm_s", "hard-coast-down"])
    def test_repair_missing_and_extra_under_hard_acceleration(self, sweep):
        # The repair predicts each interval from its neighbours (constant angular
        # acceleration), so it holds from 60 rpm at 2000 rpm/s where the interval halves
        # from one revolution to the next; a global median would fail at once.
        ref = _true_events(sweep)
        rng = np.random.default_rng(4)
        ev = synth.corrupt_events(ref, rng, missing=0.01, extra=0.005)
        n_miss = ref.size - np.isin(ref, ev).sum()
        n_extra = ev.size - (ref.size - n_miss)
        with pytest.warns(TachQualityWarning, match="missing tach pulse"):
            opr = once_per_rev(ev)
        assert opr.n_missing_filled == n_miss and opr.n_extra_removed == n_extra
        assert opr.times_s.size == ref.size
        # filled pulses sit where the model puts them: exact for a constant acceleration,
        # second order otherwise (0.14 % of an interval measured on the tau = 1.5 s
        # exponential coast-down): tolerance 0.2 % of an interval
        d = np.diff(ref)
        assert np.max(np.abs(opr.times_s - ref)[1:] / d) < 2e-3
        assert opr.repair_times_s.size == n_miss + n_extra

    def test_repair_at_the_very_start(self):
        # Faults among the first pulses: the walk starts from the first four consistent
        # intervals and repairs backwards to the start.
        ref = _true_events(synth.linear_sweep(60.0, 2000.0, 3.0))
        ev = np.sort(np.r_[np.delete(ref, [2, 5]), 0.5 * (ref[3] + ref[4])])
        with pytest.warns(TachQualityWarning):
            opr = once_per_rev(ev)
        assert (opr.n_missing_filled, opr.n_extra_removed) == (2, 1)
        assert opr.times_s.size == ref.size
        assert np.max(np.abs(opr.times_s - ref)[1:] / np.diff(ref)) < 5e-3

    @pytest.mark.parametrize("seed", [0, 1, 2])
    @pytest.mark.parametrize("pulses_per_rev", [1, 4])
    def test_repair_counts_exact_with_jitter(self, seed, pulses_per_rev):
        # 1 % missing + 0.5 % spurious and 0.1 deg rms jitter on a 600 -> 5200 rpm
        # run-up: every fault found (counts equal the injected ones), every kept and
        # inserted pulse within 0.2 % of an interval of the truth.
        sweep = synth.linear_sweep(600.0, 12000.0 / 780.0, 300.0)
        n = int(np.floor(sweep.theta(np.array(sweep.duration_s)) * pulses_per_rev))
        ref = sweep.time_at(np.arange(n + 1) / pulses_per_rev)
        rng = np.random.default_rng(seed)
        jitter_s = (0.1 / 360.0) / (sweep.rpm(ref) / 60.0)
        ev = synth.corrupt_events(ref, rng, missing=0.01, extra=0.005, jitter_s=jitter_s)
        with pytest.warns(TachQualityWarning):
            opr = once_per_rev(ev, pulses_per_rev)
        assert opr.n_missing_filled == round(0.01 * ref.size)
        assert opr.n_extra_removed == round(0.005 * ref.size)
        ref1 = ref[::pulses_per_rev]
        assert opr.times_s.size == ref1.size
        assert np.max(np.abs(opr.times_s - ref1)[1:] / np.diff(ref1)) < 2e-3

    def test_long_dropout_is_not_filled(self):
        # More than 8 pulses missing in a row is a dropout: kept as a gap, with a note.
        ref = _true_events(synth.linear_sweep(3000.0, 0.0, 2.0))
        ev = np.delete(ref, np.arange(40, 60))
        with pytest.warns(TachQualityWarning, match="irregular"):
            opr = once_per_rev(ev)
        assert opr.n_missing_filled == 0 and opr.times_s.size == ev.size
        assert any("irregular" in n for n in opr.notes)

    def test_pulses_per_rev_keeps_every_nth(self):
        sweep = synth.linear_sweep(300.0, 300.0, 5.0)
        ref4 = _true_events(sweep, pulses_per_rev=4)
        rng = np.random.default_rng(8)
        ev = synth.corrupt_events(ref4, rng, missing=0.01, extra=0.005)
        with pytest.warns(TachQualityWarning):
            opr = once_per_rev(ev, pulses_per_rev=4)
        ref1 = ref4[::4]
        assert opr.times_s.size == ref1.size
        assert np.max(np.abs(opr.times_s - ref1)[1:] / np.diff(ref1)) < 1e-3

    def test_too_few_pulses(self):
        with pytest.raises(TachError, match=r"Too few tach pulses: 4 events .* fewer than 4 "
                                            r"revolutions \(need at least 5 events\)"):
            once_per_rev([0.0, 0.1, 0.2, 0.3])
        with pytest.raises(TachError, match="need at least 9 events"):
            once_per_rev(np.arange(8) * 0.1, pulses_per_rev=2)

    def test_bad_input(self):
        with pytest.raises(TachError, match="Invalid value for 'pulses_per_rev'"):
            once_per_rev(np.arange(10.0), pulses_per_rev=0)
        with pytest.raises(TachError, match="Invalid value for 'event_times_s'"):
            once_per_rev([0.0, 0.2, 0.1, 0.3, 0.4, 0.5])

    def test_no_repair_passes_through(self):
        ev = np.array([0.0, 0.1, 0.2, 0.25, 0.3, 0.4, 0.5])
        opr = once_per_rev(ev, repair=False)
        assert_allclose(opr.times_s, ev)


class TestTachQuality:
    """Edge sampling, event jitter and plausibility of the once-per-rev reference."""

    def test_edge_samples_of_a_step_and_of_linear_ramps(self):
        # Definition (edge_samples): a step covers the local span in one sample interval
        # (1.0); a linear ramp over r sample intervals steps 1/r of the span per sample.
        sweep = synth.linear_sweep(3000.0, 0.0, 2.0)  # 3000 rpm: 400 samples per rev
        t = np.arange(int(sweep.duration_s * FS)) / FS
        theta = sweep.theta(t)
        step = np.where(np.mod(theta, 1.0) < 0.5, 0.0, 5.0)
        ev = detect_edges(step, FS)
        assert detect_edges.__module__ == "rundash.dsp.tach"
        from rundash.dsp.tach import edge_samples
        assert edge_samples(step, FS, ev) == pytest.approx(1.0, abs=1e-9)
        for r in (3.0, 6.0):
            # tach_waveform's ramp_rev is the half-width of an edge in revolutions
            x = synth.tach_waveform(theta, ramp_rev=r / 400.0 / 2.0)
            assert edge_samples(x, FS, detect_edges(x, FS)) == pytest.approx(r, rel=0.02)

    def test_timing_jitter_of_white_jitter(self):
        # Third differences of independent jitter of rms s have variance 20 s^2 (sum of
        # the squared binomial coefficients 1, 3, 3, 1); the estimate is the normal MAD
        # scale of them. 4000 events: the MAD's standard error is about 1.3 %; 6 %.
        from rundash.dsp.tach import timing_jitter
        sweep = synth.linear_sweep(600.0, 20.0, 120.0)
        ref = sweep.rev_times()
        rng = np.random.default_rng(3)
        ev = ref + 2e-5 * rng.standard_normal(ref.size)
        jit_s, jit_deg = timing_jitter(ev)
        assert jit_s == pytest.approx(2e-5, rel=0.06)
        # in degrees of rotation at the median revolution time
        assert jit_deg == pytest.approx(360.0 * jit_s / np.median(np.diff(ev)), rel=1e-12)
        exact_s, _ = timing_jitter(ref)
        # time against angle is a square root under constant acceleration, nearly a
        # quadratic over four revolutions: its third differences are far below the jitter
        assert exact_s < 1e-3 * 2e-5

    def test_sample_quantised_notch_is_warned(self):
        # A 6 deg notch read at 5 kHz by 4000-4500 rpm is one or two samples wide: the
        # edge is a single step and the events sit on the sample grid (sub-sample
        # location needs samples on the edge: common practice, no source).
        from rundash.dsp.tach import tach_quality
        fs = 5000.0
        sweep = synth.linear_sweep(4000.0, 50.0, 10.0)
        t = np.arange(int(sweep.duration_s * fs)) / fs
        phase = np.mod(sweep.theta(t), 1.0)
        x = np.where(phase < 6.0 / 360.0, 0.0, 5.0)
        ev = detect_edges(x, fs, edge="falling")
        # the level estimate still sees the notch (1.7 % of the samples)
        assert ev.size == pytest.approx(sweep.theta(np.array(10.0)), abs=2)
        from rundash.dsp.tach import edge_samples
        span = edge_samples(x, fs, ev)
        opr = once_per_rev(ev)
        with pytest.warns(TachQualityWarning, match=r"quantised to the sample grid"):
            q = tach_quality(span, opr.times_s, fs)
        assert q.quantised and span == pytest.approx(1.0)
        # quantisation is uniform over one sample: rms 1/sqrt(12) sample; in degrees of
        # rotation at 4250 rpm: 360 * 0.289 * 4250 / 60 / 5000 = 1.47 deg; 25 %
        assert q.jitter_deg == pytest.approx(1.47, rel=0.25)
        # the bound the fit cannot remove: twice the rms quantisation error, 2 / sqrt(12)
        # = 0.58 sample, of rotation at 4250 rpm (about the half sample an event can be
        # off); 20 % for the worst-tenth estimate from blocks of 200 events
        expect = 2.0 / np.sqrt(12.0) / fs * 2 * np.pi * 4250.0 / 60.0
        assert_allclose(q.angle_bound_rad([4250.0]), [expect], rtol=0.2)

    def test_well_sampled_tach_is_not_warned(self):
        from rundash.dsp.tach import edge_samples, tach_quality
        sweep = synth.linear_sweep(600.0, 500.0, 4.0)
        _, v = _tach(sweep, ramp_rev=0.02)
        ev = detect_edges(v, FS)
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            q = tach_quality(edge_samples(v, FS, ev), once_per_rev(ev).times_s, FS)
        assert not q.quantised and q.notes == ()
        assert_allclose(q.angle_bound_rad([3000.0]), [0.0])

    @pytest.mark.parametrize("lowpass_hz", [None, 200.0])
    def test_noise_only_tach_is_refused_in_one_line(self, lowpass_hz):
        # White or low-passed noise crosses any threshold at random: about a third of
        # its intervals agree with the one before, a shaft's tach nearly all.
        from scipy.signal import butter, sosfilt
        fs = 5000.0
        x = np.random.default_rng(1).standard_normal(int(60 * fs))
        if lowpass_hz:
            x = sosfilt(butter(4, lowpass_hz, fs=fs, output="sos"), x)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", TachQualityWarning)
            with pytest.raises(TachError, match=r"^The tach shows no plausible once-per-rev "
                                                r"events: only \d+ % of \d+ pulse intervals"):
                once_per_rev(detect_edges(x, fs))
