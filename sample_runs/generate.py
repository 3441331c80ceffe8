"""Generate the demo scenario of rundash: four simulated runs of one invented machine.

Run ``python sample_runs/generate.py`` from the repository root; it rewrites, in the
folder of this script (or in ``--out DIR``):

* ``tarnwick-k410.toml``  the machine description (tach, probes, data format),
* ``runs.toml``           the manifest of the runs (file, label, cycle, start, kind, test kind, notes),
* ``k410_*.wav``          one 6-channel 16-bit PCM WAV file per run,
* ``scenario.json``       the ground truth the model was built with.

The scenario is invented (site, machine, tags, history); the data are simulated. The
generator uses numpy and scipy only and does not import rundash, so that its ground truth
is independent of rundash's code. It is deterministic: every run has its own fixed seed,
so one run can be regenerated alone (``--only RUN_ID``) and comes out the same.

Physics
-------
Rotor: a rigid rotor (mass ``m``, transverse moment of inertia ``It`` about its centre of
gravity) carried by two fluid-film bearings at distances ``a`` (drive end, DE) and ``b``
(non-drive end, NDE) from the centre of gravity. Each oil film is a spring ``kb`` and a
dashpot ``cb`` between the journal and a bearing housing of mass ``mh``; each housing sits
on a pedestal (``kp``, ``cp``) to ground. Per direction the degrees of freedom are
``q = [z, psi, h_DE, h_NDE]`` (translation of the centre of gravity, tilt, housing
displacements); the journals move by ``z - a psi`` (DE) and ``z + b psi`` (NDE).
With ``T_i`` the constraint vectors of the four springs,
``K = sum k_i T_i T_i^T``, ``C = sum c_i T_i T_i^T``, ``M = diag(m, It, mh, mh)``.
This gives two rotor modes (cylindrical: both journals in phase; conical: journals about
180 degrees apart) and two housing modes far above running speed.

Directions: the model is written in the two probe directions X and Y (the principal
stiffness axes of the supports are taken to run along the probe axes, a simplification);
Y is 15 % stiffer than X (oil film and pedestal), so each rotor mode splits into an X and
a Y critical. There is no cross-coupling and no gyroscopic term, so X and Y are two
independent linear time-invariant systems. Neglecting gyroscopic stiffening of the
conical mode is a simplification of the model, not of the data: the ground truth is
computed from the very same model.

Excitation: unbalance masses ``u_i`` (kg m) at axial positions ``s_i`` from the centre of
gravity and rotor-fixed angles ``beta_i``. Along a probe axis at angle ``alpha`` the force
is ``u (Omega^2 cos(Phi - alpha) + dOmega/dt sin(Phi - alpha))`` with
``Phi = theta + beta``, ``theta(t)`` the shaft angle; the tilt moment is ``s`` times that.
A small forward 2X force (coupling misalignment type) acts at the coupling. Both enter a
state-space model integrated by :func:`scipy.signal.lsim` (exact for inputs linear
between samples) at twice the file rate, so the transient response through each critical
is the right one for the sweep rate (the peak shifts in the sweep direction and flattens:
F. M. Lewis, Trans. ASME 54, 1932). The initial state is the steady-state response at
the initial speed.

Signals: proximity probes read journal minus housing, positive towards the probe, in
volts at 7.874 mV/um (200 mV/mil; common practice, no source) around a negative gap
voltage that moves slowly with speed (journal lift); slow-roll runout of each journal
surface (a 1X and a smaller 2X component, fixed to the shaft, seen by a probe at angle
alpha as ``g(alpha - theta)``) is added; white noise at 35 dB below the top-speed 1X.
The velocity transducer on the DE housing reads housing velocity along the X-probe axis
at 20 mV/(mm/s) (about 500 mV/(in/s); common practice, no source), AC-coupled.
The tach is a proximity probe over a notch: a smooth (Gaussian) dip of the gap voltage,
of 4 V depth, whose falling edge crosses half depth exactly when ``theta`` is a whole
number of revolutions; its gap voltage drifts slowly.

Angles and phase: angles are in degrees from the tach sensor in the direction of
rotation. The steady-state 1X phasor of a probe is ``c = |c| exp(-i lag)`` with
``x = Re(c exp(i theta))``; ``lag`` is the phase lag from the reference event (falling
edge at half depth) to the next positive peak, mounting angle not applied. Amplitudes:
proximity um peak-to-peak (2|c|), velocity mm/s peak (|c|).

WAV scaling: volts = int16 / 32768 * FULL_SCALE_V. Probe channels keep their DC gap
voltage (DC-coupled recorder); the velocity channel is AC.
"""

from __future__ import annotations

import argparse
import hashlib
import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import scipy.io.wavfile
import scipy.linalg
import scipy.signal

HERE = Path(__file__).resolve().parent
FS_HZ = 4000  # file sample rate
OVERSAMPLE = 2  # simulation runs at OVERSAMPLE * FS_HZ
FULL_SCALE_V = 16.0
BASE_SEED = 20230418
PROX_MV_PER_UM = 7.874  # 200 mV/mil (common practice, no source)
VEL_MV_PER_MM_S = 20.0  # about 500 mV/(in/s) (common practice, no source)
SNR_DB = 35.0
MACHINE_SLUG = "tarnwick-k410"

# machine speeds (rpm)
RATED_RPM = 5200.0
MIN_OP_RPM = 4400.0
MCS_RPM = 5460.0  # 105 % of rated
TRIP_RPM = 6000.0  # about 110 % of MCS

# probe axes, degrees from the tach sensor in the direction of rotation (ccw from driver)
ANGLE_X_DEG = 315.0
ANGLE_Y_DEG = 45.0
ANISOTROPY_Y = 1.15  # Y supports stiffer than X by this factor

# tach notch
TACH_GAP_V = -9.0
TACH_DEPTH_V = 4.0
TACH_SIGMA_DEG = 16.0  # Gaussian dip: FWHM 37.7 deg, 10-90 % edge 27 deg


@dataclass(frozen=True)
class Unbalance:
    """One unbalance: ``u_kg_m`` at ``s_m`` from the centre of gravity (+ towards NDE),
    at rotor-fixed angle ``beta_deg`` from the reference point of the notch."""

    u_kg_m: float
    s_m: float
    beta_deg: float


@dataclass(frozen=True)
class Rotor:
    """Parameters of the rotor-bearing-pedestal model of one overhaul cycle (SI)."""

    m_kg: float = 1150.0
    it_kg_m2: float = 170.0
    a_m: float = 0.78
    b_m: float = 0.82
    mh_kg: float = 350.0
    kb_n_m: float = 1.0e8  # oil film, X direction
    cb_n_s_m: float = 6.0e4
    kp_n_m: float = 3.5e8  # pedestal, X direction
    cp_n_s_m: float = 5.0e4
    unbalance: tuple[Unbalance, ...] = ()
    f2x_n: float = 150.0  # 2X force amplitude at the coupling
    f2x_beta_deg: float = 60.0
    coupling_s_m: float = -1.10  # axial position of the coupling from the CG

    def matrices(self, direction: str):
        """Return ``M, C, K`` (4 x 4) and the constraint vectors for X or Y."""
        f = ANISOTROPY_Y if direction == "Y" else 1.0
        t = [np.array([1.0, -self.a_m, -1.0, 0.0]), np.array([1.0, self.b_m, 0.0, -1.0]),
             np.array([0.0, 0.0, 1.0, 0.0]), np.array([0.0, 0.0, 0.0, 1.0])]
        k = [f * self.kb_n_m] * 2 + [f * self.kp_n_m] * 2
        c = [self.cb_n_s_m] * 2 + [self.cp_n_s_m] * 2
        K = sum(ki * np.outer(ti, ti) for ki, ti in zip(k, t))
        C = sum(ci * np.outer(ti, ti) for ci, ti in zip(c, t))
        M = np.diag([self.m_kg, self.it_kg_m2, self.mh_kg, self.mh_kg])
        return M, C, K, t

    def state_space(self, direction: str):
        """Continuous state-space model: inputs [F_z, M_psi], outputs
        [probe DE, probe NDE, housing DE velocity] (m, m, m/s)."""
        M, C, K, t = self.matrices(direction)
        Minv = np.linalg.inv(M)
        A = np.block([[np.zeros((4, 4)), np.eye(4)], [-Minv @ K, -Minv @ C]])
        B = np.vstack([np.zeros((4, 2)), Minv[:, :2]])
        Cout = np.zeros((3, 8))
        Cout[0, :4] = t[0]
        Cout[1, :4] = t[1]
        Cout[2, 6] = 1.0
        return A, B, Cout, np.zeros((3, 2))

    def modes(self, direction: str) -> list[dict]:
        """Undamped and damped natural frequencies (rpm) and damping ratios, lowest first."""
        M, C, K, _ = self.matrices(direction)
        w2, vec = scipy.linalg.eigh(K, M)
        A, *_ = self.state_space(direction)
        lam = scipy.linalg.eigvals(A)
        lam = lam[lam.imag > 0]
        lam = lam[np.argsort(np.abs(lam))]
        out = []
        for i in range(4):
            shape = vec[:, i]
            jde = shape[0] - self.a_m * shape[1]
            jnde = shape[0] + self.b_m * shape[1]
            out.append({
                "undamped_rpm": float(np.sqrt(w2[i]) * 30.0 / np.pi),
                "damped_rpm": float(lam[i].imag * 30.0 / np.pi),
                "damping_ratio": float(-lam[i].real / abs(lam[i])),
                "journal_phase_de_nde_deg": float(0.0 if jde * jnde > 0 else 180.0),
            })
        return out

    def _gen_forces(self, direction: str):
        """Rows (u, s, beta_rad) of the unbalance seen along a probe axis."""
        alpha = np.radians(ANGLE_X_DEG if direction == "X" else ANGLE_Y_DEG)
        return [(ub.u_kg_m, ub.s_m, np.radians(ub.beta_deg) - alpha) for ub in self.unbalance], alpha

    def steady_1x(self, speed_rpm, direction: str):
        """Steady-state complex 1X phasors of the three outputs at each speed.

        Returns an array (n_speeds, 3): probe DE and NDE in m, housing velocity in m/s,
        with ``x = Re(c exp(i theta))``.
        """
        M, C, K, t = self.matrices(direction)
        rows, _ = self._gen_forces(direction)
        out = np.empty((len(speed_rpm), 3), complex)
        for j, w in enumerate(np.asarray(speed_rpm, float) * np.pi / 30.0):
            F = np.zeros(4, complex)
            for u, s, ph in rows:
                F[:2] += u * w**2 * np.exp(1j * ph) * np.array([1.0, s])
            q = np.linalg.solve(K - w**2 * M + 1j * w * C, F)
            out[j] = [t[0] @ q, t[1] @ q, 1j * w * q[2]]
        return out

    def steady_state_vector(self, speed_rpm: float, theta0: float, direction: str):
        """State ``[q, dq/dt]`` at shaft angle ``theta0`` in steady 1X + 2X response."""
        M, C, K, _ = self.matrices(direction)
        rows, alpha = self._gen_forces(direction)
        w = speed_rpm * np.pi / 30.0
        F1 = np.zeros(4, complex)
        for u, s, ph in rows:
            F1[:2] += u * w**2 * np.exp(1j * ph) * np.array([1.0, s])
        F2 = self.f2x_n * np.exp(1j * (np.radians(self.f2x_beta_deg) - alpha)) * np.array(
            [1.0, self.coupling_s_m, 0.0, 0.0])
        q1 = np.linalg.solve(K - w**2 * M + 1j * w * C, F1)
        q2 = np.linalg.solve(K - 4 * w**2 * M + 2j * w * C, F2)
        e1, e2 = np.exp(1j * theta0), np.exp(2j * theta0)
        q = (q1 * e1 + q2 * e2).real
        dq = (1j * w * q1 * e1 + 2j * w * q2 * e2).real
        return np.concatenate([q, dq])


@dataclass(frozen=True)
class Journal:
    """Slow-roll runout of a journal surface: 1X and 2X, um pp and surface angle (deg)."""

    r1_um_pp: float
    rho1_deg: float
    r2_um_pp: float
    rho2_deg: float
    gap_v: float  # DC gap voltage of the probes at rest


@dataclass(frozen=True)
class RunSpec:
    run_id: str
    cycle: str
    label: str
    kind: str  # run-up | coast-down
    started_at: str
    notes: str
    rotor: Rotor
    seed_offset: int
    slow_roll_rpm: float = 300.0
    slow_roll_s: float = 6.0
    rate_rpm_s: float = 140.0
    blend_s: float = 2.0
    top_rpm: float = MCS_RPM
    hold_s: float = 3.0
    decel_a_rpm_s: float = 80.0  # coast-down: dN/dt = -(a + b N^2)
    decel_b_per_rpm_s: float = 6.5e-6
    end_rpm: float = 250.0
    theta0_rev: float = 0.37
    extra: dict = field(default_factory=dict)

    @property
    def file(self) -> str:
        return f"k410_{self.run_id}.wav"


JOURNALS = {
    "DE": Journal(r1_um_pp=4.0, rho1_deg=110.0, r2_um_pp=1.2, rho2_deg=40.0, gap_v=-9.6),
    "NDE": Journal(r1_um_pp=3.0, rho1_deg=250.0, r2_um_pp=0.9, rho2_deg=300.0, gap_v=-10.2),
}

# probe table: name, column, kind, bearing, axis, angle
PROBES = [
    ("K410-DE-X", "ch2", "proximity", "DE", "X", ANGLE_X_DEG),
    ("K410-DE-Y", "ch3", "proximity", "DE", "Y", ANGLE_Y_DEG),
    ("K410-NDE-X", "ch4", "proximity", "NDE", "X", ANGLE_X_DEG),
    ("K410-NDE-Y", "ch5", "proximity", "NDE", "Y", ANGLE_Y_DEG),
    ("K410-DE-VEL", "ch6", "velocity", "DE", "none", ANGLE_X_DEG),
]

ROTOR_2023 = Rotor(unbalance=(Unbalance(0.0075, -0.10, 0.0), Unbalance(0.0012, 0.50, 150.0)))
# 2025: bearing clearance grown (oil film softer and less damped), deposit on the last
# impeller adds couple unbalance
ROTOR_2025 = Rotor(kb_n_m=0.92e8, cb_n_s_m=0.60 * 6.0e4,
                   unbalance=(Unbalance(0.011, -0.10, 10.0), Unbalance(0.0017, 0.50, 150.0)))

CYCLE_A = "2023 overhaul"
CYCLE_B = "2025 seal change"

RUNS = [
    RunSpec("2023_up", CYCLE_A, "First start after 2023 overhaul", "run-up",
            "2023-04-18T07:42:00Z",
            "Slow roll at 300 rpm, drive ramp 140 rpm/s to MCS, short hold.",
            ROTOR_2023, 1),
    RunSpec("2023_down", CYCLE_A, "Planned shutdown, 2023 cycle", "coast-down",
            "2023-04-18T11:05:00Z",
            "Normal stop from MCS; coast-down with process gas load.",
            ROTOR_2023, 2, theta0_rev=0.81),
    RunSpec("2025_up", CYCLE_B, "Restart after 2025 seal change", "run-up",
            "2025-06-03T06:15:00Z",
            "Slow roll at 320 rpm, drive ramp 150 rpm/s to MCS, short hold.",
            ROTOR_2025, 3, slow_roll_rpm=320.0, rate_rpm_s=150.0, theta0_rev=0.12),
    RunSpec("2025_trip", CYCLE_B, "Overspeed trip test, 2025 cycle", "coast-down",
            "2025-06-03T09:30:00Z",
            "Held at trip speed, trip, coast-down to slow roll.",
            ROTOR_2025, 4, top_rpm=TRIP_RPM, hold_s=2.0, theta0_rev=0.55),
]


# --------------------------------------------------------------------------- speed
def speed_profile(spec: RunSpec, t: np.ndarray) -> np.ndarray:
    """Shaft speed in rpm at times ``t`` (s)."""
    if spec.kind == "run-up":
        r, tau = spec.rate_rpm_s, spec.blend_s
        t1 = spec.slow_roll_s
        t_const = (spec.top_rpm - spec.slow_roll_rpm) / r - tau
        t2 = t1 + tau
        t3 = t2 + t_const
        t4 = t3 + tau
        n = np.full_like(t, spec.slow_roll_rpm)
        s = (t > t1) & (t <= t2)  # rate rises as (1 - cos)/2
        x = t[s] - t1
        n[s] += r * (x / 2 - tau / (2 * np.pi) * np.sin(np.pi * x / tau))
        n0 = spec.slow_roll_rpm + r * tau / 2
        s = (t > t2) & (t <= t3)
        n[s] = n0 + r * (t[s] - t2)
        n1 = n0 + r * t_const
        s = (t > t3) & (t <= t4)  # rate falls as (1 + cos)/2
        x = t[s] - t3
        n[s] = n1 + r * (x / 2 + tau / (2 * np.pi) * np.sin(np.pi * x / tau))
        n[t > t4] = spec.top_rpm
        return n
    a, b = spec.decel_a_rpm_s, spec.decel_b_per_rpm_s
    g = np.sqrt(a * b)
    c0 = np.arctan(spec.top_rpm * np.sqrt(b / a))
    x = np.clip(t - spec.hold_s, 0.0, None)
    return np.sqrt(a / b) * np.tan(c0 - g * x)


def duration_s(spec: RunSpec) -> float:
    if spec.kind == "run-up":
        return spec.slow_roll_s + (spec.top_rpm - spec.slow_roll_rpm) / spec.rate_rpm_s \
            + spec.blend_s + spec.hold_s
    a, b = spec.decel_a_rpm_s, spec.decel_b_per_rpm_s
    c0 = np.arctan(spec.top_rpm * np.sqrt(b / a))
    c1 = np.arctan(spec.end_rpm * np.sqrt(b / a))
    return spec.hold_s + (c0 - c1) / np.sqrt(a * b)


def speed_rate(spec: RunSpec, t: np.ndarray) -> np.ndarray:
    """dN/dt in rpm/s (analytic for the coast-down, central difference for the run-up)."""
    if spec.kind == "coast-down":
        n = speed_profile(spec, t)
        return np.where(t > spec.hold_s, -(spec.decel_a_rpm_s + spec.decel_b_per_rpm_s * n**2), 0.0)
    h = 1e-4
    return (speed_profile(spec, t + h) - speed_profile(spec, t - h)) / (2 * h)


# --------------------------------------------------------------------------- signals
def tach_volts(theta_rad: np.ndarray, drift_v: np.ndarray) -> np.ndarray:
    """Gap voltage of the tach probe over the notch (Gaussian dip, falling half-depth
    crossing at theta = 0 mod 2 pi)."""
    sigma = np.radians(TACH_SIGMA_DEG)
    centre = sigma * np.sqrt(2 * np.log(2))  # half depth at theta = 0 on the falling side
    phi = np.mod(theta_rad - centre + np.pi, 2 * np.pi) - np.pi
    return TACH_GAP_V + drift_v - TACH_DEPTH_V * np.exp(-0.5 * (phi / sigma) ** 2)


def runout_um(journal: Journal, alpha_deg: float, theta_rad: np.ndarray) -> np.ndarray:
    """Runout seen by a probe at ``alpha``: surface profile g evaluated at alpha - theta."""
    xi = np.radians(alpha_deg) - theta_rad
    return (journal.r1_um_pp / 2 * np.cos(xi - np.radians(journal.rho1_deg))
            + journal.r2_um_pp / 2 * np.cos(2 * xi - np.radians(journal.rho2_deg)))


def runout_phasor(journal: Journal, alpha_deg: float, order: int) -> complex:
    """nX runout phasor c (x = Re(c exp(i n theta))), um peak."""
    r, rho = ((journal.r1_um_pp, journal.rho1_deg) if order == 1
              else (journal.r2_um_pp, journal.rho2_deg))
    # g(alpha - theta) = r/2 cos(n theta - (n alpha - rho)): lag = n alpha - rho
    return r / 2 * np.exp(-1j * np.radians(order * alpha_deg - rho))


def simulate(spec: RunSpec):
    """Simulate one run. Returns (int16 array (n, 6), dict of noise-free signals)."""
    rng = np.random.default_rng(BASE_SEED + spec.seed_offset)
    fs_sim = FS_HZ * OVERSAMPLE
    n_file = int(round(duration_s(spec) * FS_HZ))
    t = np.arange(n_file * OVERSAMPLE) / fs_sim
    n_rpm = speed_profile(spec, t)
    w = n_rpm * np.pi / 30.0
    dw = speed_rate(spec, t) * np.pi / 30.0
    theta = 2 * np.pi * spec.theta0_rev + np.concatenate(
        [[0.0], np.cumsum(0.5 * (w[1:] + w[:-1]) / fs_sim)])
    rotor = spec.rotor
    outputs = {}
    for direction in ("X", "Y"):
        rows, alpha = rotor._gen_forces(direction)
        fz = np.zeros_like(t)
        mpsi = np.zeros_like(t)
        for u, s, ph in rows:
            g = u * (w**2 * np.cos(theta + ph) + dw * np.sin(theta + ph))
            fz += g
            mpsi += s * g
        f2 = rotor.f2x_n * np.cos(2 * theta + np.radians(rotor.f2x_beta_deg) - alpha)
        fz += f2
        mpsi += rotor.coupling_s_m * f2
        A, B, C, D = rotor.state_space(direction)
        x0 = rotor.steady_state_vector(n_rpm[0], theta[0], direction)
        _, y, _ = scipy.signal.lsim((A, B, C, D), np.column_stack([fz, mpsi]), t, X0=x0)
        outputs[direction] = y[::OVERSAMPLE]
    t = t[::OVERSAMPLE]
    theta = theta[::OVERSAMPLE]
    n_rpm = n_rpm[::OVERSAMPLE]

    # top-speed 1X for the noise level
    top = [rotor.steady_1x([spec.top_rpm], d)[0] for d in ("X", "Y")]
    lift = 25.0 * (n_rpm / TRIP_RPM) ** 2  # journal lift (um) with speed, slow
    chans = np.empty((len(t), 6))
    clean = {"t": t, "theta": theta, "speed_rpm": n_rpm}
    drift = 0.12 * np.sin(2 * np.pi * t / (3.1 * t[-1])) + 0.2 * (n_rpm / TRIP_RPM) ** 2
    chans[:, 0] = tach_volts(theta, drift) + 0.004 * rng.standard_normal(len(t))
    for col, (name, _chan, kind, bearing, axis, angle) in enumerate(PROBES, start=1):
        if kind == "proximity":
            y = outputs[axis][:, 0 if bearing == "DE" else 1] * 1e6  # um
            clean[name] = y
            amp_top_rms = abs(top["XY".index(axis)][0 if bearing == "DE" else 1]) * 1e6 / np.sqrt(2)
            noise = amp_top_rms * 10 ** (-SNR_DB / 20) * rng.standard_normal(len(t))
            sign = 1.0 if axis == "X" else -1.0  # lift is seen with opposite signs
            disp = y + runout_um(JOURNALS[bearing], angle, theta) + noise + sign * lift
            chans[:, col] = JOURNALS[bearing].gap_v + disp * PROX_MV_PER_UM / 1000.0
        else:
            v = outputs["X"][:, 2] * 1e3  # mm/s
            clean[name] = v
            amp_top_rms = abs(top[0][2]) * 1e3 / np.sqrt(2)
            noise = amp_top_rms * 10 ** (-SNR_DB / 20) * rng.standard_normal(len(t))
            chans[:, col] = (v + noise) * VEL_MV_PER_MM_S / 1000.0
    pcm = np.clip(np.round(chans / FULL_SCALE_V * 32768.0), -32768, 32767).astype(np.int16)
    return pcm, clean


# --------------------------------------------------------------------------- truth
def _half_power(speed, amp, i):
    """Half-power AF around index i; None when either side does not fall to 0.707."""
    level = amp[i] / np.sqrt(2)
    sides = []
    for step in (-1, 1):
        j = i
        while 0 <= j + step < len(amp) and amp[j + step] > level:
            if amp[j + step] > amp[j] and j != i:  # turns upward: merges with a neighbour
                return None, None, None
            j += step
        if not 0 <= j + step < len(amp):
            return None, None, None
        k = j + step
        sides.append(speed[k] + (level - amp[k]) * (speed[j] - speed[k]) / (amp[j] - amp[k]))
    n1, n2 = sides
    return float(n1), float(n2), float(speed[i] / (n2 - n1))


def _peaks(speed, amp):
    """Local maxima with prominence >= 5 % of their height, parabolic refinement."""
    idx = scipy.signal.find_peaks(amp)[0]
    out = []
    prom = scipy.signal.peak_prominences(amp, idx)[0]
    for i, p in zip(idx, prom):
        if p < 0.05 * amp[i]:
            continue
        y0, y1, y2 = amp[i - 1], amp[i], amp[i + 1]
        d = 0.5 * (y0 - y2) / (y0 - 2 * y1 + y2)
        out.append((i, float(speed[i] + d * (speed[1] - speed[0]))))
    return out


def _lag_cross(speed, rel_lag, n_peak):
    """Speed nearest n_peak (within 10 %) where the relative lag crosses 90 + k 180 deg
    upwards; None when there is none that close."""
    best = None
    for k in range(4):
        level = 90.0 + 180.0 * k
        s = np.nonzero((rel_lag[:-1] < level) & (rel_lag[1:] >= level))[0]
        for j in s:
            x = speed[j] + (level - rel_lag[j]) * (speed[j + 1] - speed[j]) / (rel_lag[j + 1] - rel_lag[j])
            if abs(x - n_peak) <= 0.1 * n_peak and (best is None or abs(x - n_peak) < abs(best[0] - n_peak)):
                best = (float(x), level)
    return best


def response_truth(rotor: Rotor, speed_lo: float, speed_hi: float) -> dict:
    """Per probe: the steady-state 1X peaks, half-power AF and 90-deg-lag speeds."""
    grid = np.arange(200.0, 9000.0 + 0.25, 0.5)
    res = {}
    for name, _col, kind, bearing, axis, _angle in PROBES:
        if kind == "proximity":
            c = rotor.steady_1x(grid, axis)[:, 0 if bearing == "DE" else 1]
        else:
            c = rotor.steady_1x(grid, "X")[:, 2]
        amp = 2 * np.abs(c) * 1e6 if kind == "proximity" else np.abs(c) * 1e3
        lag = np.degrees(np.unwrap(-np.angle(c)))
        rel = lag - lag[np.searchsorted(grid, 300.0)]
        peaks = []
        for i, n_pk in _peaks(grid, amp):
            n1, n2, af = _half_power(grid, amp, i)
            cross = _lag_cross(grid, rel, n_pk)
            peaks.append({
                "peak_rpm": round(n_pk, 1),
                "peak_amplitude": round(float(amp[i]), 3),
                "lag_at_peak_deg": round(float(np.mod(lag[i], 360.0)), 1),
                "lag_change_at_peak_deg": round(float(rel[i]), 1),
                "lag_cross_rpm": None if cross is None else round(cross[0], 1),
                "lag_cross_level_deg": None if cross is None else cross[1],
                "half_power_n1_rpm": None if n1 is None else round(n1, 1),
                "half_power_n2_rpm": None if n2 is None else round(n2, 1),
                "af_half_power": None if af is None else round(af, 3),
                "peak_within_run": bool(speed_lo <= n_pk <= speed_hi),
                "half_power_within_run": bool(n1 is not None and speed_lo <= n1 and n2 <= speed_hi),
            })
        i300 = np.searchsorted(grid, 300.0)
        res[name] = {
            "amplitude_unit": "um pp" if kind == "proximity" else "mm/s pk",
            "peaks": peaks,
            "dynamic_amplitude_at_300_rpm": round(float(amp[i300]), 4),
            "amplitude_at_mcs": round(float(amp[np.searchsorted(grid, MCS_RPM)]), 2),
        }
    return res


def per_rev_1x(theta: np.ndarray, x: np.ndarray) -> np.ndarray:
    """1X phasor per whole revolution by least squares on [1, cos, sin of theta and 2 theta]
    (exact for a signal made of those terms, whatever the samples per revolution)."""
    rev = np.floor((theta - theta[0]) / (2 * np.pi)).astype(int)
    edges = np.concatenate([[0], np.nonzero(np.diff(rev))[0] + 1])
    out = np.empty(len(edges) - 1, complex)
    for k in range(len(edges) - 1):
        th = theta[edges[k]:edges[k + 1]]
        basis = np.column_stack([np.ones_like(th), np.cos(th), np.sin(th), np.cos(2 * th), np.sin(2 * th)])
        coef = np.linalg.lstsq(basis, x[edges[k]:edges[k + 1]], rcond=None)[0]
        out[k] = coef[1] - 1j * coef[2]  # x = Re(c e^{i theta}) = Re(c) cos - Im(c) sin
    return out, edges


def as_simulated(clean: dict, truth: dict, spec: RunSpec) -> dict:
    """1X per revolution from the noise-free simulated response (no runout, no noise):
    the peak that is in the signal, with the sweep-rate effect."""
    theta = clean["theta"]
    out = {}
    for name, _col, kind, _b, _axis, _angle in PROBES:
        c, edges = per_rev_1x(theta, clean[name])
        speed = np.add.reduceat(clean["speed_rpm"], edges[:-1]) / np.diff(edges)
        amp = 2 * np.abs(c) if kind == "proximity" else np.abs(c)
        rows = []
        for pk in truth[name]["peaks"]:
            if not pk["peak_within_run"]:
                continue
            near = np.abs(speed - pk["peak_rpm"]) < 0.1 * pk["peak_rpm"]
            if not near.any():
                continue
            i = np.nonzero(near)[0][np.argmax(amp[near])]
            rows.append({"steady_peak_rpm": pk["peak_rpm"], "peak_rpm": round(float(speed[i]), 1),
                         "peak_amplitude": round(float(amp[i]), 3)})
        out[name] = rows
    return out


def sweep_rates(spec: RunSpec, truth: dict) -> list[dict]:
    """Sweep rate (rpm/s) when the speed passes each steady-state peak in the run."""
    t = np.arange(0.0, duration_s(spec), 1e-3)
    n = speed_profile(spec, t)
    rows = []
    seen = set()
    for name in truth:
        for pk in truth[name]["peaks"]:
            nc = pk["peak_rpm"]
            if not pk["peak_within_run"] or round(nc, -1) in seen:
                continue
            seen.add(round(nc, -1))
            j = np.nonzero(np.diff(np.sign(n - nc)))[0]
            if len(j):
                tc = t[j[0]]
                rate = float(speed_rate(spec, np.array([tc]))[0])
                w = nc * np.pi / 30
                rows.append({"speed_rpm": nc, "time_s": round(float(tc), 3),
                             "rate_rpm_s": round(rate, 2),
                             "dimensionless_rate": float(abs(rate) * np.pi / 30 / w**2)})
    return sorted(rows, key=lambda r: r["speed_rpm"])


# --------------------------------------------------------------------------- files
def _q(s: str) -> str:
    return json.dumps(s, ensure_ascii=False)


def machine_toml() -> str:
    lines = [
        "# Machine description of the rundash demo scenario (invented machine, simulated data).",
        "# Written by sample_runs/generate.py.",
        "",
        "[machine]",
        f"name = {_q('Tarnwick K-410 booster compressor')}",
        'kind = "compressor"',
        f"rated_speed_rpm = {RATED_RPM}",
        f"min_operating_speed_rpm = {MIN_OP_RPM}",
        f"max_continuous_speed_rpm = {MCS_RPM}",
        f"trip_speed_rpm = {TRIP_RPM}",
        'profile = "api617"',
        'rotation = "ccw"',
        "description = " + _q("Invented demo machine: two-stage centrifugal gas booster "
                              "compressor on tilting-pad bearings, driven by a variable-speed "
                              "motor, Tarnwick Flats booster station."),
        "",
        "[tach]",
        'column = "ch1"',
        "pulses_per_rev = 1",
        'edge = "falling"',
        "angle_deg = 0.0",
    ]
    for name, col, kind, bearing, axis, angle in PROBES:
        lines += ["", "[[probes]]", f"name = {_q(name)}", f'column = "{col}"', f'kind = "{kind}"']
        if kind == "proximity":
            pair = name[:-1] + ("Y" if axis == "X" else "X")
            lines += ['units = "um"', f"sensitivity_mv_per_unit = {PROX_MV_PER_UM}",
                      f"angle_deg = {angle}", f'bearing = "{bearing}"', f'axis = "{axis}"',
                      f"pair = {_q(pair)}"]
        else:
            lines += ['units = "mm/s"', f"sensitivity_mv_per_unit = {VEL_MV_PER_MM_S}",
                      f"angle_deg = {angle}", f'bearing = "{bearing}"', 'axis = "none"']
    lines += ["", "[data]", 'format = "wav"', f"full_scale_v = {FULL_SCALE_V}", 'signal_units = "V"', ""]
    return "\n".join(lines)


def runs_toml() -> str:
    lines = ["# Runs of the rundash demo scenario (invented, simulated). Written by generate.py.", "",
             f"machine = {_q(MACHINE_SLUG + '.toml')}", ""]
    for r in RUNS:
        lines += ["[[runs]]", f"file = {_q(r.file)}", f"label = {_q(r.label)}", f"cycle = {_q(r.cycle)}",
                  f"started_at = {_q(r.started_at)}", f"kind = {_q(r.kind)}"]
        if r.top_rpm > MCS_RPM:  # held above N_mc: an overspeed trip test
            lines.append('test_kind = "trip-test"')
        lines += [f"notes = {_q(r.notes)}", ""]
    return "\n".join(lines)


def rotor_json(rotor: Rotor) -> dict:
    return {
        "m_kg": rotor.m_kg, "it_kg_m2": rotor.it_kg_m2, "a_m": rotor.a_m, "b_m": rotor.b_m,
        "mh_kg": rotor.mh_kg, "kb_x_n_m": rotor.kb_n_m, "kb_y_n_m": rotor.kb_n_m * ANISOTROPY_Y,
        "cb_n_s_m": rotor.cb_n_s_m, "kp_x_n_m": rotor.kp_n_m, "kp_y_n_m": rotor.kp_n_m * ANISOTROPY_Y,
        "cp_n_s_m": rotor.cp_n_s_m,
        "unbalance": [{"u_kg_m": u.u_kg_m, "s_m": u.s_m, "beta_deg": u.beta_deg} for u in rotor.unbalance],
        "f2x_n": rotor.f2x_n, "f2x_beta_deg": rotor.f2x_beta_deg, "coupling_s_m": rotor.coupling_s_m,
    }


def run_truth(spec: RunSpec, clean: dict | None) -> dict:
    lo = min(spec.slow_roll_rpm if spec.kind == "run-up" else spec.end_rpm, spec.top_rpm)
    truth = response_truth(spec.rotor, lo, spec.top_rpm)
    d = {
        "file": spec.file, "cycle": spec.cycle, "kind": spec.kind,
        "duration_s": round(int(round(duration_s(spec) * FS_HZ)) / FS_HZ, 6),
        "speed_range_rpm": [lo, spec.top_rpm],
        "slow_roll_window_rpm": [250.0, 450.0] if spec.kind == "coast-down"
        else [spec.slow_roll_rpm - 10, spec.slow_roll_rpm + 10],
        "modes": {d_: spec.rotor.modes(d_) for d_ in ("X", "Y")},
        "probes": truth,
        "sweep_through_peaks": sweep_rates(spec, truth),
        "runout": {name: {"1x_um_pp": JOURNALS[b].r1_um_pp,
                          "1x_lag_deg": round(float(np.mod(-np.degrees(np.angle(runout_phasor(JOURNALS[b], ang, 1))), 360)), 3),
                          "2x_um_pp": JOURNALS[b].r2_um_pp,
                          "2x_lag_deg": round(float(np.mod(-np.degrees(np.angle(runout_phasor(JOURNALS[b], ang, 2))), 360)), 3)}
                   for name, _c, k, b, _a, ang in PROBES if k == "proximity"},
    }
    d["top_speed_1x"] = top_speed_vectors(spec)
    if clean is not None:
        d["as_simulated_peaks"] = as_simulated(clean, truth, spec)
    return d


def top_speed_vectors(spec: RunSpec) -> dict:
    """Steady 1X at the run's top speed per probe: as recorded (dynamic + runout) and
    dynamic alone; proximity um pp, velocity mm/s pk, lag in degrees."""
    out = {}
    for name, _c, kind, bearing, axis, angle in PROBES:
        if kind == "proximity":
            dyn = spec.rotor.steady_1x([spec.top_rpm], axis)[0][0 if bearing == "DE" else 1] * 1e6
            rec = dyn + runout_phasor(JOURNALS[bearing], angle, 1)
            f = 2.0
        else:
            dyn = rec = spec.rotor.steady_1x([spec.top_rpm], "X")[0][2] * 1e3
            f = 1.0
        out[name] = {
            "speed_rpm": spec.top_rpm,
            "amplitude": round(f * abs(rec), 4),
            "lag_deg": round(float(np.mod(-np.degrees(np.angle(rec)), 360.0)), 3),
            "dynamic_amplitude": round(f * abs(dyn), 4),
            "dynamic_lag_deg": round(float(np.mod(-np.degrees(np.angle(dyn)), 360.0)), 3),
        }
    return out


def write_run(spec: RunSpec, out: Path) -> tuple[dict, str]:
    pcm, clean = simulate(spec)
    path = out / spec.file
    scipy.io.wavfile.write(path, FS_HZ, pcm)
    return run_truth(spec, clean), hashlib.sha256(pcm.tobytes()).hexdigest()


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description="Generate the rundash demo scenario.")
    p.add_argument("--out", type=Path, default=HERE, help="output folder (default: beside this script)")
    p.add_argument("--only", help="regenerate one run (its id) and nothing else")
    args = p.parse_args(argv)
    args.out.mkdir(parents=True, exist_ok=True)
    if args.only:
        spec = {r.run_id: r for r in RUNS}[args.only]
        _, digest = write_run(spec, args.out)
        print(f"{spec.file} sha256(pcm) {digest}")
        return 0
    (args.out / f"{MACHINE_SLUG}.toml").write_text(machine_toml(), encoding="utf-8")
    (args.out / "runs.toml").write_text(runs_toml(), encoding="utf-8")
    scenario = {
        "provenance": "Invented scenario, simulated data (sample_runs/generate.py); not a measurement.",
        "machine_file": f"{MACHINE_SLUG}.toml",
        "sample_rate_hz": FS_HZ, "full_scale_v": FULL_SCALE_V, "pcm": "int16, volts = int16 / 32768 * full_scale_v",
        "probe_angles_deg": {"X": ANGLE_X_DEG, "Y": ANGLE_Y_DEG},
        "conventions": {
            "lag": "phase lag from the falling half-depth tach edge to the next positive peak, "
                   "degrees of shaft rotation, mounting angle not applied",
            "lag_change_at_peak_deg": "lag at the peak minus lag at 300 rpm (unwrapped)",
            "lag_cross_rpm": "speed where the lag change from 300 rpm crosses lag_cross_level_deg "
                             "(90 + k 180), nearest the peak",
            "amplitudes": "dynamic response only (no runout): equals the slow-roll-compensated 1X up "
                          "to the dynamic response at slow roll (dynamic_amplitude_at_300_rpm)",
            "af_half_power": "N_peak / (N2 - N1) at 0.707 x peak, steady-state curve on a 0.5 rpm grid, "
                             "null when a side merges with a neighbour",
            "top_speed_1x": "steady 1X at the top speed of the run (the hold): as recorded, i.e. "
                            "dynamic + slow-roll runout, and dynamic alone",
            "as_simulated_peaks": "per-revolution 1X of the noise-free simulated response (includes "
                                  "the sweep-rate effect)",
        },
        "machine": {"rated_speed_rpm": RATED_RPM, "min_operating_speed_rpm": MIN_OP_RPM,
                    "max_continuous_speed_rpm": MCS_RPM, "trip_speed_rpm": TRIP_RPM},
        "cycles": {CYCLE_A: rotor_json(ROTOR_2023), CYCLE_B: rotor_json(ROTOR_2025)},
        "anisotropy_y": ANISOTROPY_Y,
        "runs": {},
        "pcm_sha256": {},
    }
    for spec in RUNS:
        truth, digest = write_run(spec, args.out)
        scenario["runs"][spec.run_id] = truth
        scenario["pcm_sha256"][spec.file] = digest
        print(f"{spec.file}: {truth['duration_s']:.1f} s, {(args.out / spec.file).stat().st_size} bytes")
    (args.out / "scenario.json").write_text(json.dumps(scenario, indent=1) + "\n", encoding="utf-8")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
