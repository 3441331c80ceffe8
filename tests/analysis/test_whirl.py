"""Tests of rundash/analysis/whirl.py against orbits built in the time domain here.

Reference: the orbit of a 1X motion ``dx = Re(Dx e^{i T})``, ``dy = Re(Dy e^{i T})``
sampled over one revolution (T = 0..2 pi): its largest and smallest radius are the semi
axes, the angle of the largest radius the major-axis direction, and the sign of the
swept area (``dx dy' - dy dx'``) the whirl direction (positive: with the rotation, angles
measured in the direction of rotation). Common practice for orbits, no source needed
beyond the geometry.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from rundash.analysis.whirl import (
    directions_differ,
    major_axis_readings,
    mode_direction,
    orbit,
    pair_shape_hint,
)
from rundash.analysis.transient import fit_transient
from rundash.errors import AnalysisError
from tests.analysis import sweep_sim


def _time_orbit(dx, dy):
    T = np.linspace(0, 2 * np.pi, 400001)  # min radius sampled to ~1e-8 of the major axis
    x = np.real(dx * np.exp(1j * T))
    y = np.real(dy * np.exp(1j * T))
    r = np.hypot(x, y)
    i = int(np.argmax(r))
    area = np.sum(x[:-1] * np.diff(y) - y[:-1] * np.diff(x))
    return r.max(), r.min(), np.degrees(np.arctan2(y[i], x[i])) % 180.0, area > 0


def _probes(dx, dy, ax, ay):
    a, b = np.radians(ax), np.radians(ay)
    return dx * np.cos(a) + dy * np.sin(a), dx * np.cos(b) + dy * np.sin(b)


@pytest.mark.parametrize("seed", range(6))
@pytest.mark.parametrize("angles", [(45.0, 135.0), (0.0, 90.0), (-30.0, 75.0)])
def test_orbit_against_time_domain(seed, angles):
    rng = np.random.default_rng(seed)
    dx, dy = rng.standard_normal(2) + 1j * rng.standard_normal(2)
    cx, cy = _probes(dx, dy, *angles)
    o = orbit(cx, cy, angle_x_deg=angles[0], angle_y_deg=angles[1])
    maj, mi, ang, fwd = _time_orbit(dx, dy)
    assert_allclose(o.major, maj, rtol=1e-6)
    assert_allclose(o.minor, mi, rtol=1e-4, atol=1e-6)
    assert abs((float(o.major_angle_deg) - ang + 90.0) % 180.0 - 90.0) < 0.05
    assert bool(o.forward_whirl) == fwd


def test_backward_circle():
    # z = G e^{-iT}: a circle against the rotation; the virtual probe at 0 deg sees conj(G)
    G = 0.7 * np.exp(0.4j)
    dx, dy = np.conj(G), 1j * np.conj(G)  # dx + i dy = G e^{-iT} in time
    T = np.linspace(0, 2 * np.pi, 7)
    z = np.real(dx * np.exp(1j * T)) + 1j * np.real(dy * np.exp(1j * T))
    assert_allclose(z, G * np.exp(-1j * T), atol=1e-12)
    cx, cy = _probes(dx, dy, 45.0, 135.0)
    o = orbit(cx, cy, angle_x_deg=45.0, angle_y_deg=135.0)
    assert not bool(o.forward_whirl)
    assert_allclose(abs(o.forward), 0.0, atol=1e-12)
    assert_allclose(o.backward, np.conj(G), rtol=1e-12)
    assert_allclose(abs(o.major_vector()), 0.7, rtol=1e-12)


def test_planar_mode_direction():
    for alpha in (0.0, 30.0, 90.0, 150.0):
        R = 1.3 * np.exp(-0.8j)
        dx, dy = R * np.cos(np.radians(alpha)), R * np.sin(np.radians(alpha))
        cx, cy = _probes(dx, dy, 45.0, 135.0)
        d = mode_direction(cx, cy, angle_x_deg=45.0, angle_y_deg=135.0)
        assert d.whirl == "planar" and d.ellipticity < 1e-9
        assert not directions_differ(d.direction_deg, alpha, 0.01)
        assert_allclose(d.amplitude, 1.3, rtol=1e-12)
    assert directions_differ(0.0, 90.0) and not directions_differ(5.0, 178.0)


def test_probe_angles_too_close():
    with pytest.raises(AnalysisError, match="angle_y_deg"):
        orbit(1.0, 1.0, angle_x_deg=45.0, angle_y_deg=50.0)
    with pytest.raises(AnalysisError, match="angle_y_deg"):
        orbit(1.0, 1.0, angle_x_deg=45.0, angle_y_deg=225.0)  # the same axis, opposite side


def test_major_axis_of_a_fitted_model():
    # anisotropic 3373/3613 rpm, zeta 0.055: the major axis of the fitted model's steady
    # orbit against the closed-form 2-DOF steady orbit (sweep_sim.Rotor.steady), both read
    # by peak: within 0.2 %, half-power AF within 2 %
    rot = sweep_sim.anisotropic_rotor(3373.0, 3613.0, 0.055)
    n = np.arange(2000.0, 5000.0, 0.05)
    t = np.concatenate([[0.0], np.cumsum(60.0 / n[1:])])
    v = rot.steady(n)[:2]  # steady vectors at 0.05 rpm per revolution (~3 rpm/s), no noise
    fit = fit_transient(t, n, v, initial=[(3300.0, 0.05), (3700.0, 0.05)])
    got = major_axis_readings(fit, 0, 1, angle_x_deg=45.0, angle_y_deg=135.0)
    grid = np.linspace(fit.band_rpm[0], fit.band_rpm[1], 20001)
    ref = rot.steady(grid)
    o = orbit(ref[0], ref[1], angle_x_deg=45.0, angle_y_deg=135.0)
    i = int(np.argmax(o.major))
    (r,) = got
    assert_allclose(r.speed_rpm, grid[i], rtol=2e-3)
    a = o.major
    lev = a[i] / np.sqrt(2)
    n1 = np.interp(lev, a[:i + 1], grid[:i + 1])
    n2 = np.interp(-lev, -a[i:], grid[i:])
    assert_allclose(r.af, grid[i] / (n2 - n1), rtol=0.02)


def test_shape_hint_conical_and_cylindrical():
    # one mode seen at two bearings with X/Y at 45/135 deg: forward circles in phase
    # (cylindrical) or opposed (conical)
    F = 1.0 * np.exp(-1.1j)
    cx, cy = F * np.exp(-1j * np.radians(45)), F * np.exp(-1j * np.radians(135))
    cyl = pair_shape_hint(cx, cy, 0.8 * cx, 0.8 * cy, angles_a_deg=(45, 135), angles_b_deg=(45, 135))
    con = pair_shape_hint(cx, cy, -0.8 * cx, -0.8 * cy, angles_a_deg=(45, 135), angles_b_deg=(45, 135))
    assert cyl.shape.startswith("cylindrical") and con.shape.startswith("conical")
    # different probe orientations at bearing b: the circular parts do not care
    cxb, cyb = -F * np.exp(-1j * np.radians(0)), -F * np.exp(-1j * np.radians(90))
    con2 = pair_shape_hint(cx, cy, cxb, cyb, angles_a_deg=(45, 135), angles_b_deg=(0, 90))
    assert con2.shape.startswith("conical")
