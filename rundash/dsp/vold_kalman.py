"""Second-generation Vold–Kalman order filter, several orders at once.

The signal is modelled as a sum of order components plus noise,

.. math::

    x(n) = \\sum_k a_k(n)\\, e^{j \\Theta_k(n)} + \\eta(n), \\qquad
    \\Theta_k(n) = 2 \\pi m_k \\theta(n),

with slowly varying complex envelopes ``a_k`` obeying the structural equation
``Delta^2 a_k(n) = epsilon_k(n)`` (second difference, i.e. locally linear envelopes).
The envelopes minimise the global least-squares criterion

.. math::

    \\sum_n \\Big|x(n) - \\sum_k a_k(n) e^{j\\Theta_k(n)}\\Big|^2
    + \\sum_k \\sum_n r(n)^2 \\, |\\Delta^2 a_k(n)|^2,

solved jointly for all orders (so orders close in frequency are separated rather than
leaking into each other). The normal equations are a Hermitian positive-definite
banded system; with the unknowns interleaved sample by sample its half-bandwidth is
``3 K - 1`` for K orders, and it is solved by a banded Cholesky factorisation
(:func:`scipy.linalg.solveh_banded`) in O(n K^3) time and O(n K^2) memory.

Bandwidth. For one order at constant speed the filter's amplitude response at a
frequency offset ``df`` from the order is ``1 / (1 + r^2 (2 sin(pi df / fs))^4)``
(second-order structural equation). ``r`` is chosen so that this response is
``1 / sqrt(2)`` at ``df = bandwidth_hz / 2``: ``bandwidth_hz`` is the full -3 dB
bandwidth. With ``bandwidth_orders`` the bandwidth follows the speed,
``bandwidth_hz(n) = bandwidth_orders * rpm(n) / 60``, through a time-varying ``r(n)``.

Decimation. The signal is decimated first (polyphase anti-alias filter,
:func:`scipy.signal.resample_poly`) so that the highest order frequency sits below a
quarter of the decimated rate, where the anti-alias filter is flat; this keeps ``r``
and so the condition number of the system moderate. A bandwidth that needs
``r^2 > 1e12`` at the chosen rate, or is not below the decimated Nyquist frequency,
raises :class:`rundash.errors.DspError`.

Envelope convention: the returned envelopes are ``c_k = 2 a_k``, so that
``Re(c_k exp(j 2 pi m_k theta))`` is the order's signal and ``c_k`` follows the
phasor convention of :mod:`rundash.conventions` and :class:`rundash.dsp.OrderTrack`
(``|c|`` peak amplitude, ``lag_deg_from_phasor(c)`` phase lag), provided the angle comes
from a :class:`~rundash.dsp.SpeedProfile` (angle 0 at the first reference event).
Given a speed array instead, the angle is integrated from 0 at the first sample and the
phase has no reference event.

References
----------
.. [1] H. Vold and J. Leuridan, "High resolution order tracking at extreme slew rates,
   using Kalman tracking filters", SAE Technical Paper 931288, 1993.
.. [2] J. Tůma, "Setting the passband width in the Vold-Kalman order tracking filter",
   Proc. 12th International Congress on Sound and Vibration (ICSV12), Lisbon, 2005.
.. [3] M.-C. Pan and Y.-F. Lin, "Further exploration of Vold-Kalman-filtering order
   tracking with shaft-speed information — I: Theoretical part, numerical
   implementation and parameter investigations", Mechanical Systems and Signal
   Processing 20(5), 1134-1154, 2006.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.linalg import solveh_banded

from rundash.dsp.speed import SpeedProfile
from rundash.errors import DspError, invalid_value

__all__ = ["VoldKalmanResult", "vold_kalman", "vold_kalman_at"]

_R2_MAX = 1e12  # largest weight r^2 kept well conditioned in float64 (measured, tests)
_FLAT_FRACTION = 0.25  # highest order frequency as a fraction of the decimated rate


@dataclass(frozen=True)
class VoldKalmanResult:
    """Vold–Kalman envelopes.

    Attributes
    ----------
    time_s : ndarray, shape (n,)
        Times in s of the (decimated) output samples.
    speed_rpm : ndarray, shape (n,)
        Shaft speed in rpm at those times.
    orders : ndarray, shape (n_orders,)
    envelopes : ndarray of complex128, shape (n_orders, n)
        Complex envelopes ``c`` in the phasor convention of :mod:`rundash.conventions`.
    fs_out : float
        Sample rate of the output in Hz (``fs / decimate``).
    decimate : int
        Decimation factor used.
    bandwidth_hz : ndarray, shape (n,)
        Full -3 dB bandwidth in Hz at each output sample.
    """

    time_s: np.ndarray
    speed_rpm: np.ndarray
    orders: np.ndarray
    envelopes: np.ndarray
    fs_out: float
    decimate: int
    bandwidth_hz: np.ndarray


def _weights_r2(bw_hz: np.ndarray, fs: float) -> np.ndarray:
    """r^2 per sample so the amplitude response is 1/sqrt(2) at +-bw/2."""
    s = 2.0 * np.sin(np.pi * 0.5 * bw_hz / fs)
    return (np.sqrt(2.0) - 1.0) / s ** 4


def vold_kalman(x, fs: float, speed, orders, *, bandwidth_hz: float | None = None,
                bandwidth_orders: float | None = None,
                decimate: int | None = None, t0_s: float = 0.0) -> VoldKalmanResult:
    """Second-generation Vold–Kalman filter of several orders of one channel.

    Parameters
    ----------
    x : array_like, shape (n_samples,)
        One channel, or a piece of one whose first sample lies at ``t0_s``.
    fs : float
        Sample rate in Hz.
    speed : SpeedProfile or array_like, shape (n_samples,)
        The record's speed profile (phase referenced to the once-per-rev event), or the
        speed in rpm at every sample (phase referenced to the first sample).
    orders : sequence of float
        Orders to extract.
    bandwidth_hz : float, optional
        Full -3 dB bandwidth in Hz, constant. Give this or ``bandwidth_orders``
        (neither: see Notes).
    bandwidth_orders : float, optional
        Full -3 dB bandwidth in orders (bandwidth in Hz = this x rotation frequency).
    decimate : int, optional
        Decimation factor; default: the largest that keeps the highest order frequency
        below a quarter of the decimated rate.
    t0_s : float
        Time of the first sample in s (a piece of a longer record: the angle is read
        from the speed profile at ``t0_s + n / fs``).

    Returns
    -------
    VoldKalmanResult

    Raises
    ------
    DspError
        For a bandwidth that cannot be honoured at the (decimated) rate, an order above
        the decimated flat band, or inconsistent inputs.

    Notes
    -----
    With neither bandwidth given, ``bandwidth_orders=0.1`` is used (common practice, no
    source). The envelopes settle within about ``1 / bandwidth_hz`` s of the record's
    ends; values nearer the ends carry the filter's end effects.

    Examples
    --------
    >>> import numpy as np
    >>> fs = 2000.0
    >>> t = np.arange(20000) / fs
    >>> x = 3.0 * np.cos(2 * np.pi * 25.0 * t - 0.5)        # 1500 rpm, 1X, lag 0.5 rad
    >>> r = vold_kalman(x, fs, np.full(t.size, 1500.0), [1.0], bandwidth_hz=1.0)
    >>> c = r.envelopes[0, r.time_s.size // 2]
    >>> round(float(abs(c)), 3), round(float(-np.angle(c)), 3)
    (3.0, 0.5)
    """
    x = np.asarray(x, dtype=np.float64)
    if x.ndim != 1:
        raise DspError(invalid_value("x", f"array of shape {x.shape}", "a 1-D channel"))
    if not (np.isfinite(fs) and fs > 0):
        raise DspError(invalid_value("fs", fs, "a positive sample rate in Hz"))
    o = np.atleast_1d(np.asarray(orders, dtype=np.float64))
    if o.ndim != 1 or o.size == 0 or np.any(~np.isfinite(o)) or np.any(o <= 0):
        raise DspError(invalid_value("orders", orders, "a non-empty sequence of positive orders"))
    if bandwidth_hz is not None and bandwidth_orders is not None:
        raise DspError(invalid_value("bandwidth_orders", bandwidth_orders,
                                     "None when bandwidth_hz is given"))
    if bandwidth_hz is None and bandwidth_orders is None:
        bandwidth_orders = 0.1
    for name, v in (("bandwidth_hz", bandwidth_hz), ("bandwidth_orders", bandwidth_orders)):
        if v is not None and not (np.isfinite(v) and v > 0):
            raise DspError(invalid_value(name, v, "a positive bandwidth"))
    n = x.size
    if n < 16:
        raise DspError(invalid_value("x", f"{n} samples", "at least 16 samples"))
    if isinstance(speed, SpeedProfile):
        profile = speed
        rpm_full = None
        ev = profile._t  # the top speed of this stretch of the record sets the decimation
        i0 = max(int(np.searchsorted(ev, t0_s)) - 1, 0)
        i1 = min(int(np.searchsorted(ev, t0_s + n / fs)) + 1, ev.size)
        seg = ev[i0:i1] if i1 - i0 >= 2 else ev
        top_rpm = 60.0 / float(np.min(np.diff(seg)))
    else:
        profile = None
        rpm_full = np.asarray(speed, dtype=np.float64)
        if rpm_full.shape != x.shape or not np.all(np.isfinite(rpm_full)):
            raise DspError(invalid_value("speed", f"array of shape {rpm_full.shape}",
                                         f"a SpeedProfile or finite rpm per sample, shape {x.shape}"))
        top_rpm = float(np.max(np.abs(rpm_full)))
    f_top = float(np.max(o)) * top_rpm / 60.0
    if f_top <= 0:
        raise DspError("Speed is zero throughout: no order to follow")
    if decimate is None:
        q = max(1, int(np.floor(_FLAT_FRACTION * fs / f_top)))
    else:
        if isinstance(decimate, bool) or int(decimate) != decimate or decimate < 1:
            raise DspError(invalid_value("decimate", decimate, "an integer >= 1 or None"))
        q = int(decimate)
    fs_d = fs / q
    if f_top > _FLAT_FRACTION * fs_d and q > 1 or f_top >= 0.5 * fs_d:
        raise DspError(
            f"Order frequency {f_top:.1f} Hz is above the flat band of the decimated rate "
            f"({_FLAT_FRACTION * fs_d:.1f} Hz at decimate={q}); use a smaller decimate")
    if q > 1:
        from scipy.signal import firwin, resample_poly  # here: scipy.signal is slow to import

        # anti-alias FIR (Kaiser window, beta 7.86): measured flat within 5e-5 up to
        # 0.3 fs_d, 80 dB down at fs_d / 2
        h = firwin(40 * q + 1, 0.375 * fs_d, window=("kaiser", 7.86), fs=fs)
        xd = resample_poly(x, 1, q, window=h)
    else:
        xd = x
    m = xd.size
    t = float(t0_s) + np.arange(m) * (q / fs)
    if profile is not None:
        theta = profile._angle(t, extrapolate=True)
        # outside the profile extend linearly with the end speeds
        rpm = profile.rpm(np.clip(t, profile.t_start, profile.t_end))
        lo, hi = t < profile.t_start, t > profile.t_end
        theta[lo] = (t[lo] - profile.t_start) * rpm[lo] / 60.0
        theta[hi] = profile.n_revs + (t[hi] - profile.t_end) * rpm[hi] / 60.0
    else:
        rpm_d = rpm_full[::q][:m] if q > 1 else rpm_full
        rpm = rpm_d
        f_rot = rpm_full / 60.0
        theta_full = np.concatenate([[0.0], np.cumsum(0.5 * (f_rot[1:] + f_rot[:-1]) / fs)])
        theta = theta_full[::q][:m]
    if bandwidth_hz is not None:
        bw = np.full(m, float(bandwidth_hz))
    else:
        bw = np.maximum(float(bandwidth_orders) * np.abs(rpm) / 60.0, 1e-12)
    if np.any(bw >= 0.5 * fs_d):
        raise DspError(f"Bandwidth {np.max(bw):.3g} Hz cannot be honoured: it must stay below "
                       f"half the decimated rate ({0.5 * fs_d:.3g} Hz)")
    r2 = _weights_r2(bw, fs_d)
    if np.max(r2) > _R2_MAX:
        raise DspError(
            f"Bandwidth {np.min(bw):.3g} Hz cannot be honoured at {fs_d:.4g} Hz "
            f"(weight r^2 = {np.max(r2):.3g} > {_R2_MAX:.0e}: the system would be ill "
            "conditioned); widen the bandwidth or decimate more")
    K = o.size
    C = np.exp(1j * 2.0 * np.pi * o[:, None] * theta[None, :])  # (K, m)
    # structural weights per row of the second-difference operator (rows 0..m-3)
    rw = 0.5 * (r2[:-2] + r2[2:])
    zero = np.zeros(2)
    rp = np.concatenate([zero, rw, zero])  # rp[i + 2] = weight of row i
    diag_s = rp[2:m + 2] + 4.0 * rp[1:m + 1] + rp[0:m]  # rows i, i-1, i-2
    off1_s = -2.0 * (rp[2:m + 1] + rp[1:m])  # entry (i, i+1), i = 0..m-2
    off2_s = rp[2:m]  # entry (i, i+2), i = 0..m-3
    u = 3 * K - 1
    N = m * K
    ab = np.zeros((u + 1, N), np.complex128)
    # upper form: ab[u + i - j, j] = A[i, j], i <= j; index q = n K + k
    for k in range(K):
        cols = np.arange(m) * K + k
        ab[u, cols] = diag_s + 1.0  # |C_k|^2 = 1
        ab[u - K, cols[1:]] = off1_s
        ab[u - 2 * K, cols[2:]] = off2_s
        for l in range(k + 1, K):
            # data coupling conj(C_k) C_l at the same sample: A[nK + k, nK + l]
            ab[u - (l - k), np.arange(m) * K + l] = np.conj(C[k]) * C[l]
    rhs = (np.conj(C) * xd[None, :]).T.reshape(N)
    try:
        sol = solveh_banded(ab, rhs, lower=False, overwrite_ab=True, check_finite=False)
    except np.linalg.LinAlgError as exc:  # pragma: no cover - guarded by _R2_MAX
        raise DspError(f"Vold-Kalman system could not be factorised: {exc}") from exc
    env = 2.0 * sol.reshape(m, K).T
    return VoldKalmanResult(time_s=t, speed_rpm=np.asarray(rpm, dtype=np.float64), orders=o,
                            envelopes=env, fs_out=fs_d, decimate=q, bandwidth_hz=bw)


def vold_kalman_at(x, fs: float, profile: SpeedProfile, orders, times_s, *,
                   bandwidth_orders: float = 0.1, piece_s: float | None = None) -> np.ndarray:
    """Vold–Kalman envelopes of a long record at given times, in overlapping pieces.

    The record is cut into pieces of ``piece_s`` seconds (default: long enough for
    about 65 000 decimated samples, and at least eight settling times) overlapping by
    three settling times ``1 / bandwidth`` at the lowest speed on each side; each piece
    is filtered by :func:`vold_kalman` with the record's speed profile and only its
    middle, away from the piece's end effects, is kept. The envelopes are interpolated
    linearly (as complex numbers) to ``times_s``.

    Parameters
    ----------
    x, fs :
        The whole channel (float32 or float64, first sample at t = 0) and its sample
        rate in Hz.
    profile : SpeedProfile
        The record's speed profile (phase referenced to the once-per-rev event).
    orders : sequence of float
    times_s : array_like, shape (n,)
        Times in s where the envelopes are wanted (e.g. the order track's block times).
    bandwidth_orders : float
        Full -3 dB bandwidth in orders.
    piece_s : float, optional

    Returns
    -------
    ndarray of complex128, shape (n_orders, n)
        Envelopes in the phasor convention of :mod:`rundash.conventions`; NaN within three
        settling times (at the local speed) of the record's ends, where the filter's end
        effects lie, and where the bandwidth cannot be honoured (a piece whose speeds span too wide a range for one
        decimation is halved down to two settling times first).
    """
    x = np.asarray(x)
    o = np.atleast_1d(np.asarray(orders, dtype=np.float64))
    ts = np.asarray(times_s, dtype=np.float64)
    out = np.full((o.size, ts.size), np.nan + 0j)
    if x.size < 16 or ts.size == 0:
        return out
    rpm = profile.rpm(np.clip(ts, profile.t_start, profile.t_end))
    settle = 1.0 / max(bandwidth_orders * max(float(np.min(rpm)), 1.0) / 60.0, 1e-6)
    pad = 3.0 * settle
    f_top = float(np.max(o)) * float(np.max(rpm)) / 60.0
    q = max(1, int(np.floor(_FLAT_FRACTION * fs / max(f_top, 1e-9))))
    span = span0 = max(piece_s or 65536 * q / fs, 8.0 * settle)
    min_piece_s = 2.0 * settle
    dur = x.size / fs
    start = 0.0
    while start < dur:
        keep_a, keep_b = start, min(start + span, dur)
        a = max(0.0, keep_a - pad)
        b = min(dur, keep_b + pad)
        ia, ib = int(np.floor(a * fs)), int(np.ceil(b * fs))
        sel = (ts >= keep_a) & (ts < keep_b) if keep_b < dur else (ts >= keep_a)
        if np.any(sel) and ib - ia >= 16:
            try:
                r = vold_kalman(np.asarray(x[ia:ib], dtype=np.float64), fs, profile, o,
                                bandwidth_orders=bandwidth_orders, t0_s=ia / fs)
            except DspError:
                if keep_b - keep_a > 2.0 * min_piece_s:  # a shorter piece spans less speed
                    span = 0.5 * (keep_b - keep_a)
                    continue
                r = None  # left NaN: the bandwidth cannot be honoured here
            if r is not None:
                for k in range(o.size):
                    env = r.envelopes[k]
                    out[k, sel] = (np.interp(ts[sel], r.time_s, env.real)
                                   + 1j * np.interp(ts[sel], r.time_s, env.imag))
        start = keep_b
        span = span0
    # the filter's end effects: three settling times at the speeds of the record's ends
    ends = profile.rpm(np.array([profile.t_start, profile.t_end]))
    t_a = 3.0 * 60.0 / max(bandwidth_orders * float(ends[0]), 1e-9)
    t_b = dur - 3.0 * 60.0 / max(bandwidth_orders * float(ends[1]), 1e-9)
    out[:, (ts < t_a) | (ts > t_b)] = np.nan
    return out
