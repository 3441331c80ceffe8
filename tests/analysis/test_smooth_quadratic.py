"""The quadratic smoother of the response curve equals scipy's Savitzky-Golay filter.

Reference: ``scipy.signal.savgol_filter(x, window, 2)`` with its default edge handling
(``mode='interp'``: a quadratic fitted to the first and last window); A. Savitzky,
M. J. E. Golay, Analytical Chemistry 36 (1964) 1627-1639.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal

from rundash.analysis.response_curve import smooth_quadratic


@pytest.mark.parametrize("n, window", [(5, 5), (9, 9), (10, 9), (50, 7), (400, 21),
                                       (2001, 41), (3000, 5)])
def test_equals_scipy_savgol_real_and_complex(n, window):
    rng = np.random.default_rng(n + window)
    x = rng.standard_normal(n)
    assert_allclose(smooth_quadratic(x, window), signal.savgol_filter(x, window, 2),
                    rtol=0, atol=1e-12)
    z = rng.standard_normal(n) + 1j * rng.standard_normal(n)
    want = signal.savgol_filter(z.real, window, 2) + 1j * signal.savgol_filter(z.imag, window, 2)
    assert_allclose(smooth_quadratic(z, window), want, rtol=0, atol=1e-12)


def test_a_quadratic_passes_unchanged():
    # a least-squares quadratic fit reproduces a quadratic exactly, edges included
    t = np.linspace(-3.0, 5.0, 101)
    x = 0.5 * t ** 2 - 2.0 * t + 1.0
    assert_allclose(smooth_quadratic(x, 11), x, rtol=0, atol=1e-10)
