"""Tests of the order tracker's inner kernels (rundash.dsp.orders): the exponentials of
higher orders built by recurrence from the base order, the angle evaluated per
revolution, and results that do not depend on how revolutions are grouped.

References used beside the assertions:
- N. J. Higham, Accuracy and Stability of Numerical Algorithms, 2nd ed., SIAM 2002,
  section 3.6 (complex multiplication): the computed product of x and y is within
  sqrt(2) gamma_2 |x| |y| of the exact one, gamma_2 = 2u / (1 - 2u), u the unit
  roundoff (2^-24 for float32);
- numpy's float64 cosine and sine as the reference ("direct cos/sin") for the float32
  kernels.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from rundash.dsp import OrderTracker, concat_tracks, speed_profile, track_orders
from rundash.dsp import orders as orders_mod
from tests import synth

U32 = 2.0 ** -24  # unit roundoff of float32
GAMMA2 = 2 * U32 / (1 - 2 * U32)


@pytest.mark.parametrize("orders, base", [((1, 2, 3, 4), 1.0), ((1, 2, 3, 4, 5, 6, 7, 8), 1.0),
                                          ((0.5, 1.0, 1.5, 2.5), 0.5), ((2, 4), 1.0)])
def test_recurrence_error_bound_against_direct_cos_sin(orders, base):
    # The tracker builds W exp(j p a) for p = 2 ... from one float32 cos/sin of the base
    # phase a per sample: e_(p+1) = fl(e_p c), c the computed (cos a, sin a).
    # Error bound (Higham 2002, section 3.6, complex product within sqrt(2) gamma_2 |x||y|),
    # with eta = |c - exp(j a)| the float32 cos/sin error measured against float64:
    #   d_1 <= |W| (eta + sqrt(2) u (1 + eta))
    #   d_(p+1) <= d_p (1 + eta)(1 + sqrt(2) gamma_2) + |W| (eta + sqrt(2) gamma_2 (1 + eta))
    # i.e. it grows linearly in p (about p (eta + sqrt(2) gamma_2) |W|), never with the
    # number of samples: every sample starts again from its own base phase.
    rng = np.random.default_rng(0)
    nr, L = 40, 300
    ph = rng.uniform(-0.1, 2 * np.pi * 1.01 * base, (nr, L)).astype(np.float32)
    Wt = rng.uniform(0.0, 2.0 / L, (nr, L)).astype(np.float32)
    prof = speed_profile(np.arange(11) / 10.0)
    tr = OrderTracker(prof, 1000.0, 1, orders=orders, revs_per_block=2)
    assert tr._base_order == base and tr._powers is not None
    n_o = len(orders)
    VT = np.empty((2 * n_o + 1, nr, L), np.float32)
    VT[2 * n_o] = Wt
    tr._exponentials(ph, VT[2 * n_o], VT)
    a = ph.astype(np.float64)
    W = Wt.astype(np.float64)
    c = np.cos(ph).astype(np.float64) + 1j * np.sin(ph).astype(np.float64)
    eta = np.abs(c - np.exp(1j * a))
    bound = W * (eta + np.sqrt(2) * U32 * (1 + eta))
    bounds = {1: bound}
    for p in range(2, int(max(tr._powers)) + 1):
        bound = bound * (1 + eta) * (1 + np.sqrt(2) * GAMMA2) + W * (eta + np.sqrt(2) * GAMMA2 * (1 + eta))
        bounds[p] = bound
    for i, p in enumerate(tr._powers):
        got = VT[2 * i].astype(np.float64) + 1j * VT[2 * i + 1].astype(np.float64)
        direct = W * np.exp(1j * p * a)  # direct cos/sin of the same float32 phase
        err = np.abs(got - direct)
        assert np.all(err <= bounds[int(p)]), (p, float(np.max(err / np.maximum(W, 1e-30))))
        # and it stays at float32 rounding level: p (eta + sqrt(2) gamma_2) <= 8 x 3e-7
        assert np.max(err / np.maximum(W, 1e-30)) < 2.5e-6


def test_float32_precision_after_many_revolutions():
    # The angle is evaluated per revolution from that revolution's own cubic (theta - k
    # lies in [0, 1]), so float32 tracking is as precise after 400 000 revolutions as
    # after ten: float32 agrees with float64 to 1e-5 of amplitude 1 (the tolerance of
    # the float32 test at the record's start in test_orders.py).
    fs = 6000.0
    f_rev = 50.0  # 3000 rpm for 8000 s: 400 000 revolutions
    prof = speed_profile(np.arange(400_001) / f_rev)
    start = int(7990.0 * fs)
    t = (start + np.arange(int(2.0 * fs))) / fs
    theta = f_rev * t
    x = synth.probe_signal(theta, 1.0, 60.0, harmonics=[(2, 0.5, 5.0), (4, 0.2, 100.0)],
                           offset=2.0)
    t64 = track_orders(x, fs, prof, orders=(1, 2, 3, 4), start_index=start)
    t32 = track_orders(x.astype(np.float32), fs, prof, orders=(1, 2, 3, 4), start_index=start)
    assert t32.rev_index[0] > 399_000 and t32.n_blocks > 90
    assert_allclose(t32.vectors, t64.vectors, rtol=0, atol=1e-5)
    # the float64 result is the truth to 1e-9 (constant speed: the DFT of whole cycles)
    assert_allclose(np.abs(t64.vectors[0, 0]), 1.0, atol=1e-9)
    assert_allclose(np.abs(t64.vectors[0, 3]), 0.2, atol=1e-9)


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_grouping_of_revolutions_does_not_change_results(monkeypatch, dtype):
    # Revolutions are computed in groups of about GROUP_SAMPLES samples (cache); every
    # revolution's result depends only on its own samples, to the last bit.
    fs = 5000.0
    sweep = synth.linear_sweep(400.0, 300.0, 10.0)
    t = np.arange(int(sweep.duration_s * fs)) / fs
    rng = np.random.default_rng(3)
    x = np.stack([synth.probe_signal(sweep.theta(t), 1.0, 10.0, rng=rng, snr_db=30.0,
                                     offset=5.0) for _ in range(3)]).astype(dtype)
    prof = speed_profile(sweep.rev_times())
    ref = track_orders(x, fs, prof, orders=(0.5, 1, 2), revs_per_block=2)
    for g in (700, 3000, 1 << 20):
        monkeypatch.setattr(orders_mod, "GROUP_SAMPLES", g)
        tr = OrderTracker(prof, fs, 3, orders=(0.5, 1, 2), revs_per_block=2)
        got = concat_tracks([tr.feed(x, 0), tr.finish()])
        assert np.array_equal(got.rev_index, ref.rev_index)
        assert np.array_equal(got.vectors, ref.vectors)
        assert np.array_equal(got.direct_pp, ref.direct_pp)
        assert np.array_equal(got.direct_rms, ref.direct_rms)
