"""Rotor sweeps integrated with scipy, then tach-detected and order-tracked by rundash's dsp.

The equations of motion are written here, independently of rundash's modal fit: a linear
multi-degree-of-freedom system ``M d'' + C d' + K d = B f(t)`` in the plane of the probes,
integrated by :func:`scipy.signal.lsim` (exact for inputs linear between samples). The
unbalance force of a rotating eccentric mass, with the shaft accelerating, is
``U (Omega^2 - i dOmega/dt) exp(i Theta)`` as the complex number ``Fx + i Fy``
(W. T. Thomson and M. D. Dahleh, "Theory of Vibration with Applications", 5th ed., 1998,
sec. 3.3, with the tangential term of the angular acceleration), angles measured from the
reference sensor in the direction of rotation. A probe at angle ``a`` reads
``dx cos a + dy sin a``. The once-per-rev (or N-per-rev) tach is the pulse train of
:func:`tests.synth.tach_waveform`; the tach, speed and order tracking are rundash's own
(tested separately against their own references).

Noise: white Gaussian noise on every probe waveform, ``snr_db`` below the mean square of
that probe's clean signal over the record (a waveform-level SNR).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import signal

from tests import synth


@dataclass(frozen=True)
class Tracked:
    """Order-tracked result of a simulated sweep."""

    time_s: np.ndarray
    speed_rpm: np.ndarray
    vectors: np.ndarray  # (P, n) complex 1X
    rev_index: np.ndarray
    profile: object
    waveforms: np.ndarray  # (P, n_samples)
    fs: float


@dataclass(frozen=True)
class Rotor:
    """``M d'' + C d' + K d = f``; ``dofs`` name each coordinate as (station, 'x'|'y');
    ``unbalance[station]`` is the complex unbalance (kg m, angle from the reference in the
    direction of rotation); ``probes`` are (station, angle_deg)."""

    M: np.ndarray
    C: np.ndarray
    K: np.ndarray
    dofs: tuple
    unbalance: dict
    probes: tuple

    def steady(self, speed_rpm, scale: float = 1e6) -> np.ndarray:
        """Closed-form steady 1X phasors of every probe, shape (P, n), in units of
        ``1/scale`` m (um by default): ``(K - w^2 M + i w C) d = w^2 f`` per speed."""
        w = 2 * np.pi * np.atleast_1d(np.asarray(speed_rpm, float)) / 60.0
        f = np.zeros(len(self.dofs), complex)
        for i, (st, ax) in enumerate(self.dofs):
            u = self.unbalance.get(st, 0.0)
            f[i] = u if ax == "x" else -1j * u  # Fy phasor: Im(U e^{i T}) = Re(-i U e^{i T})
        out = np.empty((len(self.probes), w.size), complex)
        for j, wj in enumerate(w):
            d = np.linalg.solve(self.K - wj * wj * self.M + 1j * wj * self.C, wj * wj * f)
            for p, (st, a) in enumerate(self.probes):
                ix = self.dofs.index((st, "x"))
                iy = self.dofs.index((st, "y"))
                ar = np.radians(a)
                out[p, j] = (d[ix] * np.cos(ar) + d[iy] * np.sin(ar)) * scale
        return out


def simulate(rotor: Rotor, sweep: synth.Sweep, fs: float, *, snr_db: float | None = 30.0,
             pulses_per_rev: int = 1, seed: int = 0, scale: float = 1e6) -> Tracked:
    """Integrate the rotor through ``sweep`` with lsim, add noise, track 1X with rundash."""
    from rundash.dsp import detect_edges, once_per_rev, speed_profile, track_orders

    t = np.arange(int(np.floor(sweep.duration_s * fs))) / fs
    theta = sweep.theta(t)
    Th = 2 * np.pi * theta
    W = 2 * np.pi * sweep.rpm(t) / 60.0
    dW = np.gradient(W, t)
    n = len(rotor.dofs)
    Minv = np.linalg.inv(rotor.M)
    A = np.block([[np.zeros((n, n)), np.eye(n)], [-Minv @ rotor.K, -Minv @ rotor.C]])
    B = np.vstack([np.zeros((n, n)), Minv])
    Cp = np.zeros((len(rotor.probes), 2 * n))
    for p, (st, a) in enumerate(rotor.probes):
        Cp[p, rotor.dofs.index((st, "x"))] = np.cos(np.radians(a)) * scale
        Cp[p, rotor.dofs.index((st, "y"))] = np.sin(np.radians(a)) * scale
    D = np.zeros((len(rotor.probes), n))
    u = np.zeros((t.size, n))
    for i, (st, ax) in enumerate(rotor.dofs):
        U = rotor.unbalance.get(st, 0.0)
        z = U * (W * W - 1j * dW) * np.exp(1j * Th)
        u[:, i] = z.real if ax == "x" else z.imag
    # steady initial state at the first speed
    w0 = W[0]
    f0 = np.array([rotor.unbalance.get(st, 0.0) * (1 if ax == "x" else -1j)
                   for st, ax in rotor.dofs]) * w0 * w0
    d0 = np.linalg.solve(rotor.K - w0 * w0 * rotor.M + 1j * w0 * rotor.C, f0)
    x0 = np.concatenate([(d0 * np.exp(1j * Th[0])).real, (1j * w0 * d0 * np.exp(1j * Th[0])).real])
    _, y, _ = signal.lsim((A, B, Cp, D), u, t, X0=x0)
    y = np.atleast_2d(y.T) if y.ndim == 1 else y.T
    if snr_db is not None:
        rng = np.random.default_rng(seed)
        ms = np.mean(y * y, axis=1, keepdims=True)
        y = y + np.sqrt(ms / 10 ** (snr_db / 10.0)) * rng.standard_normal(y.shape)
    tach = synth.tach_waveform(theta, pulses_per_rev)
    edges = detect_edges(tach, fs)
    opr = once_per_rev(edges, pulses_per_rev)
    prof = speed_profile(opr.times_s)
    tr = track_orders(y, fs, prof, orders=(1,))
    return Tracked(tr.time_s, tr.speed_rpm, tr.vectors[:, 0, :], tr.rev_index, prof, y, fs)


def sdof_rotor(fn_rpm: float, zeta: float, *, probe_angle_deg: float = 0.0,
               unbalance: complex = 1e-5) -> Rotor:
    """Isotropic single mode (one station): k = wn^2, c = 2 zeta wn, m = 1; one probe."""
    wn = 2 * np.pi * fn_rpm / 60.0
    M = np.eye(2)
    return Rotor(M, 2 * zeta * wn * M, wn * wn * M, (("A", "x"), ("A", "y")), {"A": unbalance},
                 (("A", probe_angle_deg),))


def anisotropic_rotor(f_soft_rpm: float, f_stiff_rpm: float, zeta: float, *,
                      axis_deg: float = 0.0, probe_angles=(45.0, 135.0),
                      second_bearing_scale: float = 0.7) -> Rotor:
    """Two bearings of a rigid, symmetric rotor on orthotropic supports (unit mass per
    bearing): principal stiffnesses wn_soft^2 along ``axis_deg`` and wn_stiff^2 across it,
    damping 2 zeta wn per axis; bearing B carries ``second_bearing_scale`` of the unbalance
    (so both bearings see both modes, at different levels). Probes X, Y at each bearing at
    ``probe_angles``."""
    ws, wt = (2 * np.pi * f / 60.0 for f in (f_soft_rpm, f_stiff_rpm))
    a = np.radians(axis_deg)
    Rm = np.array([[np.cos(a), -np.sin(a)], [np.sin(a), np.cos(a)]])
    K1 = Rm @ np.diag([ws * ws, wt * wt]) @ Rm.T
    C1 = Rm @ np.diag([2 * zeta * ws, 2 * zeta * wt]) @ Rm.T
    Z = np.zeros((2, 2))
    K = np.block([[K1, Z], [Z, K1]])
    C = np.block([[C1, Z], [Z, C1]])
    dofs = (("A", "x"), ("A", "y"), ("B", "x"), ("B", "y"))
    probes = tuple((st, ang) for st in ("A", "B") for ang in probe_angles)
    return Rotor(np.eye(4), C, K, dofs, {"A": 1e-5, "B": second_bearing_scale * 1e-5 * np.exp(0.4j)},
                 probes)


def two_mode_rotor(f1_rpm: float, f2_rpm: float, zeta1: float, zeta2: float, *,
                   probe_angles=(45.0, 135.0)) -> Rotor:
    """Isotropic rotor with two bearings A and B whose modes have opposite shapes:
    mode 1 (f1) moves A and B in phase (cylindrical), mode 2 (f2) in opposition (conical).
    Built from mass-normalised shapes ``[1, 1]/sqrt 2`` and ``[1, -1]/sqrt 2`` per plane:
    ``K = Phi diag(wn^2) Phi^T``, ``C = Phi diag(2 zeta wn) Phi^T`` (proportional
    damping); unbalance at both bearings with different angles."""
    w1, w2 = (2 * np.pi * f / 60.0 for f in (f1_rpm, f2_rpm))
    phi = np.array([[1.0, 1.0], [1.0, -1.0]]) / np.sqrt(2.0)
    Kp = phi @ np.diag([w1 * w1, w2 * w2]) @ phi.T
    Cp = phi @ np.diag([2 * zeta1 * w1, 2 * zeta2 * w2]) @ phi.T
    # dofs: A x, B x, A y, B y
    K = np.zeros((4, 4))
    C = np.zeros((4, 4))
    for sl in (slice(0, 2), slice(2, 4)):
        K[sl, sl] = Kp
        C[sl, sl] = Cp
    dofs = (("A", "x"), ("B", "x"), ("A", "y"), ("B", "y"))
    probes = tuple((st, ang) for st in ("A", "B") for ang in probe_angles)
    return Rotor(np.eye(4), C, K, dofs, {"A": 1e-5, "B": 0.5e-5 * np.exp(2.0j)}, probes)
