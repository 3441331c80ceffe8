"""The numpy stand-ins that keep :mod:`scipy.signal` out of ``rundash process`` give
scipy's own results.

References (scipy as the reference library): :func:`scipy.signal.find_peaks` with a
``prominence`` bound (peaks and ``prominences``), :func:`scipy.signal.get_window`
(periodic Hann, boxcar), :func:`scipy.signal.savgol_coeffs` (quadratic, centred window),
:func:`scipy.signal.medfilt` (inside its zero padding). Prominence as defined in the
scipy documentation of ``peak_prominences`` (the height above the higher of the two
lowest points reached before a higher sample or the curve's end).
"""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pytest
from scipy import signal

from rundash.analysis.response_curve import _quadratic_smoother
from rundash.dsp.peaks import peaks_with_prominence
from rundash.dsp.spectra import _window


def _curves(seed: int, count: int):
    rng = np.random.default_rng(seed)
    for k in range(count):
        n = int(rng.integers(1, 400))
        kind = k % 5
        if kind == 0:
            x = rng.standard_normal(n)
        elif kind == 1:  # plateaus of every length, even ones included
            x = np.round(2.0 * rng.standard_normal(n))
        elif kind == 2:
            x = np.cumsum(rng.standard_normal(n))
        elif kind == 3:  # NaNs end the walks
            x = np.round(rng.standard_normal(n), 1)
            x[rng.random(n) < 0.05] = np.nan
        else:
            x = np.round(np.cumsum(rng.standard_normal(n)))
            x[rng.random(n) < 0.1] = np.nan
        yield x, float(rng.choice([0.0, 1e-12, 0.5, 3.0]))


def test_peaks_and_prominences_equal_scipy_find_peaks():
    for x, bound in _curves(17, 2500):
        idx, prom = peaks_with_prominence(x, bound)
        want, props = signal.find_peaks(x, prominence=bound)
        np.testing.assert_array_equal(idx, want)
        np.testing.assert_array_equal(prom, props["prominences"])


def test_peaks_of_resonance_curves_equal_scipy():
    # smooth curves of the kind the analysis reads: two damped modes on a grid
    s = np.linspace(500.0, 12000.0, 4001)
    for fn2, z in [(7000.0, 0.02), (3300.0, 0.1), (11990.0, 0.05)]:
        r1, r2 = s / 3000.0, s / fn2
        a = np.abs(r1 ** 2 / (1 - r1 ** 2 + 0.1j * r1) + 0.5 * r2 ** 2 / (1 - r2 ** 2 + 2j * z * r2))
        idx, prom = peaks_with_prominence(a, 1e-12 * a.max())
        want, props = signal.find_peaks(a, prominence=1e-12 * a.max())
        np.testing.assert_array_equal(idx, want)
        np.testing.assert_array_equal(prom, props["prominences"])


def test_short_and_flat_inputs():
    for x in ([], [1.0], [1.0, 2.0], [3.0, 3.0, 3.0], [0.0, 1.0, 1.0]):
        idx, prom = peaks_with_prominence(x)
        assert idx.size == 0 and prom.size == 0
    with pytest.raises(ValueError, match="1-D"):
        peaks_with_prominence(np.zeros((3, 3)))


@pytest.mark.parametrize("n", [16, 17, 1000, 1024, 8192])
def test_windows_equal_scipy_get_window(n):
    np.testing.assert_array_equal(_window("hann", n), signal.get_window("hann", n, fftbins=True))
    np.testing.assert_array_equal(_window("boxcar", n), signal.get_window("boxcar", n))
    np.testing.assert_array_equal(_window("flattop", n), signal.get_window("flattop", n))


def test_quadratic_window_equals_scipy_savgol_coeffs():
    for w in range(3, 302, 2):
        np.testing.assert_array_equal(_quadratic_smoother(w)[0], signal.savgol_coeffs(w, 2))


def test_running_median_equals_medfilt_inside_its_padding():
    # transient_fit's noise-scale factor: the median of each window of the edge-padded
    # values, which scipy.signal.medfilt gives away from its zero padding
    rng = np.random.default_rng(3)
    for g, w in [(8, 7), (50, 9), (300, 31), (31, 31)]:
        q = rng.exponential(size=g)
        padded = np.pad(q, w // 2, mode="edge")
        ours = np.median(np.lib.stride_tricks.sliding_window_view(padded, w), axis=1)
        np.testing.assert_array_equal(ours, signal.medfilt(padded, w)[w // 2: w // 2 + g])


def test_processing_a_run_does_not_import_scipy_signal():
    # the imports of `rundash process` (the command, the pipeline and what it calls):
    # scipy.signal and scipy.stats cost about 0.4 s of every run's start (measured with
    # python -X importtime; common practice, no source)
    code = ("import sys, rundash.cli.commands, rundash.workflows.pipeline; "
            "print(sorted(m for m in ('scipy.signal', 'scipy.stats') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], check=True, capture_output=True,
                         text=True).stdout.strip()
    assert out == "[]"
