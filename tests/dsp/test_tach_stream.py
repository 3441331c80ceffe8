"""Tests of the streaming edge detector (rundash.dsp.tach.EdgeDetector): a tach channel
read in chunks gives exactly the events of detect_edges on the whole channel, in every
level mode, whatever the chunk sizes (down to one sample); the record-wide percentiles
equal numpy's (numpy.percentile as the reference, linear interpolation).
"""

from __future__ import annotations

import numpy as np
import pytest

from rundash.dsp import tach
from rundash.errors import TachError
from tests import synth

MODES = [dict(), dict(threshold=2.5), dict(threshold=2.5, hysteresis=1.0),
         dict(hysteresis=0.5), dict(level_window_s=0.05)]


def _streamed(x, fs, cuts, **kw):
    det = tach.EdgeDetector(x.size, fs, **kw)
    bounds = [0, *sorted(set(int(c) for c in cuts if 0 < c < x.size)), x.size]
    pieces = list(zip(bounds[:-1], bounds[1:]))
    passes = 0
    while det.needs_pass:
        for a, b in pieces:
            det.feed_levels(x[a:b], a)
        det.end_pass()
        passes += 1
    ev = np.concatenate([det.feed(x[a:b], a) for a, b in pieces] + [det.finish()])
    return ev, passes


def _signal(seed, dtype, n=40000, fs=5000.0):
    rng = np.random.default_rng(seed)
    sweep = synth.linear_sweep(200.0, 900.0, n / fs)  # 200 -> 1100 rpm
    theta = sweep.theta(np.arange(n) / fs)
    drift = 0.3 * np.sin(2 * np.pi * np.arange(n) / n)  # slow DC drift of a probe tach
    x = synth.tach_waveform(theta, 2, ramp_rev=0.004, duty=0.2) + drift
    x = x + 0.05 * rng.standard_normal(n)
    return x.astype(dtype), fs


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
@pytest.mark.parametrize("kw", MODES, ids=["auto", "fixed", "fixed-hyst", "auto-hyst", "short-window"])
@pytest.mark.parametrize("edge", ["rising", "falling"])
def test_chunked_equals_one_shot(dtype, kw, edge):
    x, fs = _signal(1, dtype)
    whole = tach.detect_edges(x, fs, edge=edge, t0=3.0, **kw)
    assert whole.size > 100
    rng = np.random.default_rng(2)
    for cuts in (rng.integers(0, x.size, 7), np.arange(97, x.size, 4099), []):
        got, passes = _streamed(x, fs, cuts, edge=edge, t0=3.0, **kw)
        assert np.array_equal(got, whole)
    # passes over the channel before the edges (class doc): levels 1, none, radix 2 / 4
    expected = {0: 1, 1: 2 if dtype == np.float32 else 4, 2: 0, 3: 1, 4: 1}
    assert passes == expected[MODES.index(kw)]


def test_one_sample_chunks_and_edges_on_chunk_boundaries():
    # every edge straddles a chunk boundary when the chunks are 1 to 3 samples long
    x, fs = _signal(3, np.float32, n=6000)
    whole = tach.detect_edges(x, fs)
    rng = np.random.default_rng(4)
    cuts = np.cumsum(rng.integers(1, 4, x.size))
    got, _ = _streamed(x, fs, cuts)
    assert whole.size > 10 and np.array_equal(got, whole)


def test_detect_edges_works_in_pieces(monkeypatch):
    # detect_edges itself walks a long channel in pieces (bounded work memory); the
    # piece size does not change the events
    x, fs = _signal(5, np.float32)
    ref = tach.detect_edges(x, fs)
    monkeypatch.setattr(tach, "EDGE_CHUNK_SAMPLES", 1234)
    assert np.array_equal(tach.detect_edges(x, fs), ref)


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_exact_quantiles_equal_numpy_percentile(dtype):
    # reference: numpy.percentile (linear interpolation between order statistics)
    rng = np.random.default_rng(6)
    for x in (rng.standard_normal(10007) * 1e3, np.repeat([-2.0, 0.0, 5.0], [3, 5000, 2]),
              rng.integers(-3, 4, 999).astype(float), np.array([7.0]), -np.abs(rng.random(50))):
        x = x.astype(dtype)
        qs = [0.0, 0.25, 2.0, 50.0, 98.0, 99.75, 100.0]
        est = tach._ExactQuantiles(x.size, qs, dtype)
        while not est.done:
            for a in range(0, x.size, 1000):
                est.feed(x[a:a + 1000])
            est.end_pass()
        ref = np.percentile(x.astype(np.float64), qs)
        np.testing.assert_allclose(est.values(), ref, rtol=1e-15, atol=0)


def test_short_and_bad_streams():
    for n in (0, 1, 2):
        det = tach.EdgeDetector(n, 1000.0)
        assert not det.needs_pass
        assert det.feed(np.zeros(n), 0).size == 0
    det = tach.EdgeDetector(100, 1000.0)
    det.feed_levels(np.zeros(40), 0)
    with pytest.raises(TachError, match="Invalid value for 'start'.*40"):
        det.feed_levels(np.zeros(10), 50)
    with pytest.raises(TachError, match="before the level passes"):
        tach.EdgeDetector(100, 1000.0).feed(np.zeros(100), 0)
    det = tach.EdgeDetector(100, 1000.0)
    with pytest.raises(TachError, match="NaN or inf"):
        det.feed_levels(np.full(100, np.nan), 0)
    with pytest.raises(TachError, match="Invalid value for 'n_samples'"):
        tach.EdgeDetector(-1, 1000.0)
