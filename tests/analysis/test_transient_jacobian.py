"""Tests of the analytic derivatives of the transient modal fit.

References outside rundash:

* central differences of :func:`rundash.analysis.transient_model.mode_means` (the
  derivative's definition, evaluated numerically) for the derivatives of the mode means;
* :func:`scipy.optimize.approx_fprime` (scipy's finite-difference Jacobian) for the
  Jacobian of the variable-projection residual that the fit hands to
  :func:`scipy.optimize.least_squares`.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import approx_fprime

from rundash.analysis.transient_fit import _pre_roll_s, _Problem
from rundash.analysis.transient_model import (
    integration_intervals, mode_means, mode_means_derivatives, mode_response, sweep_history,
)


def _sweep(rate_rpm_s=100.0):
    n = np.arange(1500.0, 4500.0, rate_rpm_s * 60.0 / 3000.0)  # rpm per revolution
    t = np.cumsum(60.0 / n)
    return t, n


@pytest.mark.parametrize("fn_hz, zeta", [(50.0, 0.05), (45.0, 0.3), (52.0, 0.003), (40.0, 0.85)])
def test_mode_means_derivatives_match_central_differences(fn_hz, zeta):
    t, n = _sweep()
    hist = sweep_history(t, n)
    # two separate stretches, each with its pre-roll: two integration intervals
    steps = np.concatenate([hist.data_step[300:600], hist.data_step[900:1300]])
    iv = integration_intervals(hist, steps, 0.5)
    assert len(iv) == 2
    got = mode_means_derivatives(hist, iv, fn_hz, zeta)
    a, b = mode_means(hist, iv, fn_hz, zeta)
    # the values are mode_means's own, to the bit; with mode_means's pass kept, the same
    # derivatives to the bit
    assert np.array_equal(got[0], a) and np.array_equal(got[1], b)
    keep: dict = {}
    mode_means(hist, iv, fn_hz, zeta, keep=keep)
    assert len(keep) == 2
    again = mode_means_derivatives(hist, iv, fn_hz, zeta, keep=keep)
    assert all(np.array_equal(x, y) for x, y in zip(again, got))
    for j, x in enumerate((fn_hz, zeta)):
        def at(v):
            return mode_means(hist, iv, v, zeta) if j == 0 else mode_means(hist, iv, fn_hz, v)
        errs = ([], [])
        # central differences: truncation ~ step^2 (a hundredfold per decade, as measured
        # here), rounding ~ eps / step; the best of three steps is within 3e-7 of the
        # largest derivative in these cases
        for rel in (1e-4, 1e-5, 1e-6):
            step = rel * x
            (ap, bp), (am, bm) = at(x + step), at(x - step)
            for i, want in enumerate(((ap - am) / (2 * step), (bp - bm) / (2 * step))):
                scale = np.abs(want).max()
                assert scale > 0
                errs[i].append(np.abs(got[2 + 2 * j + i] - want).max() / scale)
        assert min(errs[0]) <= 1e-5 and min(errs[1]) <= 1e-5, errs


@pytest.mark.parametrize("conj", [True, False])
@pytest.mark.parametrize("group", [1, 3])
@pytest.mark.parametrize("fixed", [(), ((2000.0, 0.08),)])
def test_problem_jacobian_matches_scipy_approx_fprime(conj, group, fixed):
    # two modes, three probes with different weights, uneven row weights, a held mode:
    # the analytic Jacobian of the variable-projection residual against scipy's
    # finite differences of the residual itself
    t, n = _sweep(300.0)
    rng = np.random.default_rng(1)
    parts = ((1 + 1j, 0.5 - 1j), (-0.3 + 1j, 1.0), (2.0, -1j))
    c = np.vstack([mode_response(t, n, 3000.0, 0.05, r0) + mode_response(t, n, 3400.0, 0.04, r1)
                   for r0, r1 in parts])
    c = c + 0.01 * (rng.standard_normal(c.shape) + 1j * rng.standard_normal(c.shape))
    hist = sweep_history(t, n)
    idx = np.flatnonzero((n > 2400) & (n < 4000))
    prob = _Problem(hist, hist.data_step[idx], n[idx], c[:, idx].T, np.array([1.0, 2.0, 0.5]),
                    "linear", conj, _pre_roll_s(2900.0, 0.01), 3200.0, group, fixed)
    prob.rw = 1.0 + 0.3 * np.sin(np.arange(prob.n_groups))
    x = np.array([2950.0 / 3200.0, math.log(0.06), 3450.0 / 3200.0, math.log(0.035)])
    J = prob.jac(x)
    want = approx_fprime(x, prob.fun)
    assert J.shape == want.shape
    h = 1e-6
    central = np.column_stack([(prob.fun(x + h * e) - prob.fun(x - h * e)) / (2 * h)
                               for e in np.eye(x.size)])
    for k in range(x.size):  # each parameter's derivative
        scale = np.abs(central[:, k]).max()
        # scipy's forward differences: error ~ sqrt(eps) x the curvature (measured up to
        # 7e-5 of a column here); central differences: ~ step^2 and eps / step (measured
        # up to 6e-7)
        assert np.abs(J[:, k] - want[:, k]).max() <= 2e-4 * scale
        assert np.abs(J[:, k] - central[:, k]).max() <= 5e-6 * scale
