"""Tests of rundash/analysis/amplification.py against closed-form SDOF responses."""

import numpy as np
import pytest
from numpy.testing import assert_allclose

from rundash.analysis.amplification import fit_modes, half_power, phase_af
from rundash.errors import AnalysisError
from tests.analysis.closed_form import sdof_half_power_af, sdof_unbalance

FN = 3000.0


def _sdof(zeta, lo=0.3, hi=2.0, n=20001):
    speed = FN * np.linspace(lo, hi, n)
    return speed, sdof_unbalance(speed, FN, zeta)


class TestHalfPower:
    @pytest.mark.parametrize("zeta, af", [(0.05, 9.900), (0.10, 4.797), (0.20, 2.073)])
    def test_sdof_closed_form(self, zeta, af):
        # Check values derived in closed form (roots of the half-power quartic of
        # X/e = r^2/sqrt((1-r^2)^2+(2 zeta r)^2), Thomson & Dahleh 5th ed. sec. 3.3);
        # the helper solves the quartic independently and must agree to 3 decimals.
        assert_allclose(sdof_half_power_af(zeta), af, atol=5e-4)
        speed, c = _sdof(zeta)
        amp = np.abs(c)
        res = half_power(speed, amp, peak_index=int(np.argmax(amp)))
        assert res.determinable and res.reason == ""
        # noise-free: within 1 % of the closed form (brief); the 0.085 rpm grid and linear
        # interpolation leave far less than that
        assert_allclose(res.af, af, rtol=1e-3)
        # peak at w_n / sqrt(1 - 2 zeta^2) for unbalance excitation (closed form)
        assert_allclose(res.nc_rpm, FN / np.sqrt(1 - 2 * zeta ** 2), rtol=1e-5)

    def test_peak_speed_argument(self):
        speed, c = _sdof(0.05)
        a = half_power(speed, np.abs(c), peak_speed=2900.0)
        b = half_power(speed, np.abs(c), peak_index=int(np.argmax(np.abs(c))))
        assert a == b

    def test_low_side_missing_is_not_extrapolated(self):
        # data start above N1 (N1 = 0.9210 fn at zeta 0.1): not determinable, no AF
        speed, c = _sdof(0.1, lo=0.95, hi=2.0)
        res = half_power(speed, np.abs(c), peak_index=int(np.argmax(np.abs(c))))
        assert not res.determinable and res.af is None and res.n1_rpm is None
        assert "low side does not fall" in res.reason
        assert res.n2_rpm is not None

    def test_heavy_damping_high_side_never_falls(self):
        # zeta 0.5: the unbalance response tends to 1 above resonance, the peak is
        # 1/(2 zeta sqrt(1-zeta^2)) = 1.155 > 1/0.707 only barely: it never reaches 0.707
        speed, c = _sdof(0.5, hi=4.0)
        res = half_power(speed, np.abs(c), peak_index=int(np.argmax(np.abs(c))))
        assert not res.determinable and "high side does not fall" in res.reason

    def test_merged_peak(self):
        # two peaks 12 % apart whose valley stays above 0.707 of the lower one
        speed = np.linspace(1000, 6000, 5001)
        amp = np.abs(sdof_unbalance(speed, 3000, 0.06)) + 0.9 * np.abs(sdof_unbalance(speed, 3350, 0.06))
        i = int(np.argmax(np.where(speed < 3150, amp, 0)))
        res = half_power(speed, amp, peak_index=i)
        assert not res.determinable and "high side merges with a neighbouring peak" in res.reason
        assert res.n1_rpm is not None and res.n2_rpm is None

    def test_validation(self):
        with pytest.raises(AnalysisError, match="Invalid value for 'speed_rpm'"):
            half_power([3, 2, 1], [1, 2, 1], peak_index=1)
        with pytest.raises(AnalysisError, match="exactly one of the two"):
            half_power([1, 2, 3], [1, 2, 1])
        with pytest.raises(AnalysisError, match="Invalid value for 'amplitude'"):
            half_power([1, 2, 3], [1, 2], peak_index=1)
        with pytest.raises(AnalysisError, match="Invalid value for 'level'"):
            half_power([1, 2, 3], [1, 2, 1], peak_index=1, level=1.5)


class TestPhaseAF:
    @pytest.mark.parametrize("zeta", [0.02, 0.05, 0.1, 0.25])
    def test_sdof_identities(self, zeta):
        # Viscous SDOF (Thomson & Dahleh 5th ed. sec. 3.3): tan(lag) = 2 zeta r/(1-r^2)
        # gives r45 r135 = 1 and r135 - r45 = 2 zeta exactly, and dlag/dr = 1/zeta at r=1.
        speed, c = _sdof(zeta, lo=0.1, hi=3.0, n=40001)
        lag = np.degrees(-np.angle(c))
        res = phase_af(speed, lag, nc_rpm=FN, baseline_deg=0.0)
        assert_allclose(res.nc_geo, FN, rtol=1e-6)
        assert_allclose(res.n90, FN, rtol=1e-6)
        assert_allclose(res.af_45_135, 1 / (2 * zeta), rtol=1e-5)
        # slope from a 4-point line fit on a 0.2 rpm grid: curvature error below 1e-4
        assert_allclose(res.af_slope, 1 / (2 * zeta), rtol=1e-3)

    def test_baseline_shift(self):
        speed, c = _sdof(0.05)
        lag = np.degrees(-np.angle(c * np.exp(-1j * np.radians(200.0)))) % 360.0
        res = phase_af(speed, lag, nc_rpm=FN, baseline_deg=200.0)
        assert_allclose(res.n90, FN, rtol=1e-6)

    def test_no_crossing(self):
        speed = np.linspace(500, 2000, 100)
        res = phase_af(speed, np.full(100, 10.0), nc_rpm=1000.0, baseline_deg=0.0)
        assert res.af_slope is None and res.af_45_135 is None
        assert "does not cross 90" in res.reason


class TestFitModes:
    def test_noise_free_recovery(self):
        speed = np.linspace(2000, 4000, 201)
        c = 8 * np.exp(-0.7j) * sdof_unbalance(speed, FN, 0.04) + (0.5 + 0.2j)
        fit = fit_modes(speed, c, residual="constant")
        m = fit.modes[0]
        assert_allclose([m.fn_rpm, m.zeta], [FN, 0.04], rtol=1e-6)
        assert_allclose(m.af, 1 / (2 * 0.04), rtol=1e-6)
        assert_allclose(m.residue, 8 * np.exp(-0.7j), rtol=1e-6)
        assert_allclose(fit.constant, 0.5 + 0.2j, atol=1e-6)
        assert fit.rms_error < 1e-8
        assert_allclose(fit.model(speed), c, atol=1e-6)

    def test_uncertainty_covers_truth(self):
        # seeded noise: the one-sigma Jacobian uncertainty is honest if the errors over
        # 40 seeds are about one sigma rms (chi-square bound, 40 dof: 0.6..1.4 sigma)
        speed = np.linspace(2200, 3800, 161)
        truth = 10 * sdof_unbalance(speed, FN, 0.06)
        z_err = []
        for seed in range(40):
            rng = np.random.default_rng(seed)
            noisy = truth + 0.5 * (rng.standard_normal(161) + 1j * rng.standard_normal(161))
            m = fit_modes(speed, noisy, residual="none").modes[0]
            z_err.append((m.zeta - 0.06) / m.zeta_std)
        rms = float(np.sqrt(np.mean(np.square(z_err))))
        assert 0.6 < rms < 1.4

    def test_two_modes(self):
        speed = np.linspace(1500, 7000, 800)
        c = 5 * sdof_unbalance(speed, 2500, 0.05) + 3j * sdof_unbalance(speed, 5200, 0.08)
        fit = fit_modes(speed, c, n_modes=2, residual="none")
        assert_allclose([m.fn_rpm for m in fit.modes], [2500, 5200], rtol=1e-5)
        assert_allclose([m.zeta for m in fit.modes], [0.05, 0.08], rtol=1e-4)

    def test_more_damping_lower_af(self):
        # more damping -> lower AF (common practice, no source)
        speed = np.linspace(1500, 4500, 301)
        afs = [fit_modes(speed, sdof_unbalance(speed, FN, z)).modes[0].af for z in (0.03, 0.08, 0.2)]
        assert afs[0] > afs[1] > afs[2]

    def test_validation(self):
        with pytest.raises(AnalysisError, match="Invalid value for 'n_modes'"):
            fit_modes(np.arange(1.0, 50.0), np.ones(49), n_modes=0)
        with pytest.raises(AnalysisError, match="Invalid value for 'residual'"):
            fit_modes(np.arange(1.0, 50.0), np.ones(49), residual="cubic")
        with pytest.raises(AnalysisError, match="Invalid value for 'initial'"):
            fit_modes(np.arange(1.0, 50.0), np.ones(49), initial=((10.0, 0.1), (20.0, 0.1)))
