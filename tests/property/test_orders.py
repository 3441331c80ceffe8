"""Property tests of the order tracker (rundash.dsp.orders): random but valid records
never crash with anything but DspError/TachError, keep the documented invariants (phase
lag in [0, 360), amplitudes and direct levels >= 0 and finite, block speeds inside the
speed profile's range, times increasing), and incremental feeding in random chunks
gives the one-shot result."""

from __future__ import annotations

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from rundash.conventions import lag_deg_from_phasor
from rundash.dsp import orders, speed
from rundash.errors import DspError

SETTINGS = settings(max_examples=40, deadline=None, derandomize=True,
                    suppress_health_check=[HealthCheck.too_slow])


@st.composite
def records(draw):
    fs = draw(st.sampled_from([256.0, 1000.0, 2048.0]))
    dur = draw(st.floats(0.5, 4.0))
    rpm0 = draw(st.floats(120.0, 6000.0))
    rpm1 = draw(st.floats(120.0, 6000.0))
    n_ch = draw(st.integers(1, 3))
    ords = draw(st.lists(st.sampled_from([0.5, 1.0, 2.0, 3.0, 4.0]), min_size=1, max_size=4,
                         unique=True))
    rpb = 2 if 0.5 in ords else draw(st.integers(1, 3))
    seed = draw(st.integers(0, 2**32 - 1))
    scale = draw(st.sampled_from([1e-3, 1.0, 1e3]))
    dtype = draw(st.sampled_from([np.float32, np.float64]))
    rng = np.random.default_rng(seed)
    n = int(fs * dur)
    t = np.arange(n) / fs
    a = (rpm1 - rpm0) / 60.0 / dur
    theta = rpm0 / 60.0 * t + 0.5 * a * t * t
    k = np.arange(int(np.floor(theta[-1])) + 1)
    # event times of theta = k (closed form of the quadratic)
    f0 = rpm0 / 60.0
    rev_t = 2 * k / (f0 + np.sqrt(f0 * f0 + 2 * a * k)) if a else k / f0
    x = np.zeros((n_ch, n))
    for order in (0.5, 1.0, 2.0, 3.0):
        amp = rng.uniform(0, 1, (n_ch, 1))
        lag = rng.uniform(0, 2 * np.pi, (n_ch, 1))
        x += amp * np.cos(2 * np.pi * order * theta - lag)
    x += rng.uniform(-1, 1, (n_ch, 1)) + 0.3 * rng.standard_normal((n_ch, n))
    return (scale * x).astype(dtype), fs, rev_t, tuple(ords), rpb


class TestOrderTracker:
    @SETTINGS
    @given(rec=records(), cuts=st.lists(st.floats(0.0, 1.0), max_size=6))
    def test_invariants_and_chunked_equals_one_shot(self, rec, cuts):
        x, fs, rev_t, ords, rpb = rec
        try:
            prof = speed.speed_profile(rev_t)
            track = orders.track_orders(x, fs, prof, orders=ords, revs_per_block=rpb)
        except DspError:  # TachError is a DspError
            return
        n_ch = x.shape[0]
        assert track.vectors.shape == (n_ch, len(ords), track.n_blocks)
        lag = lag_deg_from_phasor(track.vectors)
        assert np.all((lag >= 0) & (lag < 360))
        assert np.all(np.isfinite(track.vectors))
        assert np.all(np.abs(track.vectors) >= 0)
        for d in (track.direct_pp, track.direct_rms):
            assert np.all(np.isfinite(d)) and np.all(d >= 0)
        if track.n_blocks:
            assert np.all(np.diff(track.time_s) > 0)
            lo, hi = prof.rpm(prof.rev_times_s).min(), prof.rpm(prof.rev_times_s).max()
            # block means lie within the profile's range (10 ppm for the float arithmetic)
            assert np.all(track.speed_rpm >= lo * (1 - 1e-5))
            assert np.all(track.speed_rpm <= hi * (1 + 1e-5))
        # OrderTracker.feed in random chunks gives the one-shot track (documented)
        n = x.shape[1]
        edges = sorted({0, n, *(int(c * n) for c in cuts)})
        tr = orders.OrderTracker(prof, fs, n_ch, orders=ords, revs_per_block=rpb)
        parts = [tr.feed(x[:, a:b], a) for a, b in zip(edges[:-1], edges[1:]) if b > a]
        parts.append(tr.finish())
        inc = orders.concat_tracks(parts)
        assert inc.n_blocks == track.n_blocks
        tol = 1e-4 if x.dtype == np.float32 else 1e-9
        scale = max(float(np.max(np.abs(x))), 1e-300)
        assert_allclose(inc.vectors, track.vectors, rtol=0, atol=tol * scale)
        assert_allclose(inc.time_s, track.time_s, rtol=0, atol=1e-12)
