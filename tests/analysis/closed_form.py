"""Closed-form rotor responses for analysis tests, and per-revolution run synthesis.

Sign convention of rundash.conventions: a phasor ``c = |c| exp(-i lag)``, so a complex
dynamic stiffness ``k - m w^2 + i c w`` gives a lag that rises through resonance.

Sources: single-degree-of-freedom unbalance response, W. T. Thomson and M. D. Dahleh,
"Theory of Vibration with Applications", 5th ed., 1998, sec. 3.3 (rotating unbalance);
Jeffcott rotor on flexible damped supports and the two-mass rotor, M. I. Friswell et
al., "Dynamics of Rotating Machines", Cambridge University Press, 2010, ch. 3 (built
here as linear complex systems solved per speed with numpy).
"""

from __future__ import annotations

import numpy as np


def sdof_unbalance(speed_rpm, fn_rpm: float, zeta: float, e: float = 1.0):
    """Complex SDOF unbalance response ``e r^2 / (1 - r^2 + 2 i zeta r)``.

    Its magnitude is ``X/e = r^2 / sqrt((1 - r^2)^2 + (2 zeta r)^2)`` and its lag
    ``atan2(2 zeta r, 1 - r^2)`` (Thomson & Dahleh, 5th ed., eq. 3.3-2 style).
    """
    r = np.asarray(speed_rpm, dtype=float) / fn_rpm
    return e * r * r / (1.0 - r * r + 2j * zeta * r)


def sdof_half_power_af(zeta: float) -> float:
    """Exact half-power AF of the SDOF unbalance response (roots of the quartic).

    ``X^2 = L^2`` with ``L^2 = Xpk^2 / 2`` gives, for ``s = r^2``,
    ``(1 - L^2) s^2 + L^2 (2 - 4 zeta^2) s - L^2 = 0``; ``Nc`` is the peak
    ``1/sqrt(1 - 2 zeta^2)``.
    """
    rp = 1.0 / np.sqrt(1.0 - 2.0 * zeta * zeta)
    xp2 = rp ** 4 / ((1 - rp * rp) ** 2 + (2 * zeta * rp) ** 2)
    l2 = xp2 / 2.0
    roots = np.roots([1.0 - l2, l2 * (2.0 - 4.0 * zeta * zeta), -l2])
    s = np.sort(roots[np.isreal(roots) & (roots.real > 0)].real)
    r1, r2 = np.sqrt(s)
    return float(rp / (r2 - r1))


def jeffcott(speed_rpm, *, m_kg: float, k_shaft: float, k_bearing: float, c_bearing: float,
             unbalance_kg_m: float):
    """Disk and journal 1X displacement (m, complex) of a Jeffcott rotor.

    Massless shaft of stiffness ``k_shaft`` in series with two identical supports
    ``k_bearing + i w c_bearing`` (massless journals); unbalance force ``U w^2``.
    Returns ``(disk, journal)``.
    """
    w = 2 * np.pi * np.asarray(speed_rpm, dtype=float) / 60.0
    kb = 2.0 * (k_bearing + 1j * w * c_bearing)
    k_eff = 1.0 / (1.0 / k_shaft + 1.0 / kb)
    disk = unbalance_kg_m * w * w / (k_eff - m_kg * w * w)
    journal = disk * k_eff / kb
    return disk, journal


def two_mass(speed_rpm, *, m, k, c, unbalance):
    """1X response of a two-mass rotor: ``(K + i w C - w^2 M) z = w^2 u``.

    ``m = (m1, m2)``; ``k = (k1, k12, k2)`` springs ground-m1, m1-m2, m2-ground;
    ``c = (c1, c2)`` dampers to ground; ``unbalance = (u1, u2)`` complex (kg m).
    Returns an array of shape (n, 2).
    """
    w = 2 * np.pi * np.asarray(speed_rpm, dtype=float) / 60.0
    mm = np.diag(m)
    kk = np.array([[k[0] + k[1], -k[1]], [-k[1], k[1] + k[2]]])
    cc = np.diag(c)
    u = np.asarray(unbalance, dtype=complex)
    a = kk[None] + 1j * w[:, None, None] * cc[None] - (w * w)[:, None, None] * mm[None]
    return np.linalg.solve(a, ((w * w)[:, None] * u[None])[..., None])[..., 0]


def per_rev_run(response, *, start_rpm: float, end_rpm: float, rate_rpm_s: float,
                snr_db: float = 20.0, runout=0.0, slow_roll_rpm=(300.0, 500.0), seed: int = 0,
                end_wobble_rpm: float = 0.0):
    """Per-revolution 1X vectors of a quasi-steady linear sweep.

    ``response(speed_rpm) -> complex`` is evaluated at each revolution of a linear sweep
    from ``start_rpm`` to ``end_rpm`` at ``|rate_rpm_s|``; complex Gaussian noise at
    ``snr_db`` below the mean power of the response over the run is added, and so is a
    constant ``runout`` vector; then the mean vector over the ``slow_roll_rpm`` window is
    subtracted (slow-roll compensation, common practice, no source). ``end_wobble_rpm``
    adds a small speed dither at both ends so speed is not monotonic there.
    Returns ``time_s, speed_rpm, vector``.
    """
    rng = np.random.default_rng(seed)
    a = np.sign(end_rpm - start_rpm) * abs(rate_rpm_s)
    duration = abs((end_rpm - start_rpm) / a)
    revs = int((start_rpm + end_rpm) / 2 * duration / 60.0)
    k = np.arange(revs)
    t = (-start_rpm + np.sqrt(start_rpm ** 2 + 120.0 * a * k)) / a
    speed = start_rpm + a * t
    if end_wobble_rpm:
        edge = np.exp(-t / 5.0) + np.exp(-(duration - t) / 5.0)
        speed = speed + end_wobble_rpm * edge * np.sin(2 * np.pi * t / 2.0)
    clean = response(speed)
    p = float(np.mean(np.abs(clean) ** 2))
    sigma = np.sqrt(p / 10 ** (snr_db / 10.0) / 2.0)
    v = clean + runout + sigma * (rng.standard_normal(revs) + 1j * rng.standard_normal(revs))
    lo, hi = slow_roll_rpm
    m = (speed >= lo) & (speed <= hi)
    if np.any(m):
        v = v - v[m].mean()
    return t, speed, v
