"""Critical speeds from a 1X response versus speed: find, confirm, classify (pairing X/Y
and run directions in :mod:`rundash.analysis.critical_pairs`, readings at the top of a run
in :mod:`rundash.analysis.run_edges`; both importable from here).

Input is one probe and one run direction: shaft speeds in rpm and the slow-roll
compensated complex 1X phasors ``c`` of :mod:`rundash.conventions` (``|c|`` peak amplitude
in storage units, lag ``= conventions.lag_deg_from_phasor(c)``). Per-revolution data
(thousands of noisy points, speed not uniformly spaced, not monotonic at the ends) are
averaged as complex vectors into speed bins, then smoothed, before anything is read
(:mod:`rundash.analysis.response_curve`, with the readings of one band); what the sweep
rate does to a reading is :mod:`rundash.analysis.sweep_rate`.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, replace
from typing import Literal

import numpy as np

from rundash.analysis.amplification import (
    HalfPower,
    Mode,
    PhaseAF,
    half_power,
    phase_af,
)
from rundash.analysis.response_curve import (
    band_edges,
    fit_band,
    polar_loop,
    prepare_curve,
    quadrature_speed,
    stalled_side,
)
from rundash.analysis.sweep_rate import (
    QUASI_STEADY_RATIO,
    drop_beating,
    sweep_reading,
)
from rundash.dsp.peaks import peaks_with_prominence
from rundash.errors import AnalysisError, SweepRateWarning, invalid_value

__all__ = ["Critical", "find_criticals", "CRITICALLY_DAMPED_AF", "QUASI_STEADY_RATIO",
           "CriticalPair", "combine_bearing", "compare_directions", "RisingAtTop",
           "rising_at_top", "first_candidate_rpm"]

Direction = Literal["run-up", "coast-down"]
Measure = Literal["displacement", "velocity", "acceleration"]
_INTEGRATIONS = {"displacement": 0, "velocity": 1, "acceleration": 2}
Classification = Literal["confirmed", "amplitude-only", "phase-only"]
Confidence = Literal["high", "medium", "low"]

#: AF below which a mode counts as critically damped (API 617 rule, from memory).
CRITICALLY_DAMPED_AF = 2.5


@dataclass(frozen=True)
class Critical:
    """One critical speed (or candidate) of one probe in one run direction.

    Speeds in rpm; ``peak_amplitude`` in the caller's amplitude unit times
    ``amplitude_factor`` (e.g. um p-p); lags in degrees.

    Attributes
    ----------
    speed_rpm : float
        The reported critical speed; ``speed_basis`` says which one it is
        (``'amplitude peak'`` for peaks; for phase-only criticals ``'90 deg phase (modal
        fit)'``, the fitted natural frequency, or ``'90 deg phase'``, the measured
        crossing when no fit was usable).
    peak_speed_rpm, quadrature_speed_rpm : float or None
        Amplitude-peak speed and the speed where the lag is 90 deg above the mode's
        below-resonance baseline. Both are kept: they differ with damping (the
        unbalance-response peak sits at ``fn/sqrt(1-2 zeta^2)``, the 90 deg point at fn).
    peak_amplitude : float or None
    phase_change_deg : float
        Lag change across the peak band (about 180 deg for a lightly damped mode).
    lag_at_peak_deg : float or None
        Measured lag at the peak, wrapped to [0, 360).
    lag_above_baseline_deg : float or None
        Lag at the peak minus ``baseline_lag_deg`` (about 90 deg at a critical).
    baseline_lag_deg : float
        Below-resonance lag of the mode (from the modal fit when it succeeded, else the
        lag at the low edge of the band), wrapped to [0, 360).
    band_rpm : tuple of float
        Speed band used for phase, fit and sweep rate.
    half_power, phase_af, fit :
        The three AF estimates (:class:`HalfPower`, :class:`PhaseAF`, :class:`Mode`).
    af_governing, af_method, af_reason :
        The AF used for margins, which estimate it is and why.
    critically_damped : bool
        ``af_governing < critically_damped_af`` (2.5): no separation margin required.
    sweep_rate_rpm_s, sweep_decay_ratio, sweep_note :
        Speed rate through the band (signed), band crossing time over the modal decay
        time, and a note when the sweep is too fast for a quasi-steady reading.
    polar_loop : bool or None
        Whether the 1X vector traces a circular loop through the band.
    classification, confidence, evidence :
        ``'confirmed'`` | ``'amplitude-only'`` | ``'phase-only'``; ``'high'`` |
        ``'medium'`` | ``'low'``; plain sentences a reviewer can check.
    """

    speed_rpm: float
    speed_basis: str
    peak_speed_rpm: float | None
    quadrature_speed_rpm: float | None
    peak_amplitude: float | None
    phase_change_deg: float
    lag_at_peak_deg: float | None
    lag_above_baseline_deg: float | None
    baseline_lag_deg: float
    band_rpm: tuple[float, float]
    half_power: HalfPower | None
    phase_af: PhaseAF
    fit: Mode | None
    af_governing: float | None
    af_method: str
    af_reason: str
    critically_damped: bool
    sweep_rate_rpm_s: float | None
    sweep_decay_ratio: float | None
    sweep_note: str
    polar_loop: bool | None
    classification: Classification
    confidence: Confidence
    evidence: tuple[str, ...]
    direction: str
    amplitude_factor: float


def _governing(hp: HalfPower | None, fit: Mode | None, pa: PhaseAF):
    if hp is not None and hp.determinable:
        return hp.af, "half-power", ("half-power bandwidth, the estimate API 684 and API 617 "
                                     "specify")
    why = hp.reason if hp is not None else "no amplitude peak"
    if fit is not None:
        return fit.af, "modal fit", f"{why}; modal-fit AF = 1/(2 zeta) used instead"
    if pa.af_45_135 is not None:
        return pa.af_45_135, "phase 45/135", f"{why}; no usable modal fit; 45/135 deg phase points used"
    if pa.af_slope is not None:
        return pa.af_slope, "phase slope", f"{why}; no usable modal fit; phase slope used"
    return None, "none", f"{why}; no other estimate available"


# --------------------------------------------------------------------------- main entry
def find_criticals(speed_rpm, vector, *, time_s=None, amplitude_factor: float = 2.0,
                   direction: Direction = "run-up", min_prominence: float = 0.05,
                   min_height: float = 0.05, phase_confirm_deg: float = 60.0,
                   bin_rpm: float | None = None, smooth_rpm: float | None = None,
                   critically_damped_af: float = CRITICALLY_DAMPED_AF,
                   quasi_steady_ratio: float = QUASI_STEADY_RATIO,
                   fit: bool = True, amplitude_floor=None,
                   measure: Measure = "displacement") -> tuple[Critical, ...]:
    """Find and classify the critical speeds in one probe's 1X response.

    Steps: (1) average the complex vectors into speed bins (``bin_rpm``) and smooth them
    (Savitzky-Golay, quadratic, ``smooth_rpm`` wide) when the data are noisy; (2) take
    amplitude peaks with :func:`scipy.signal.find_peaks` whose prominence is at least
    ``min_prominence`` of their height (and well above the noise) and whose height is at
    least ``min_height`` of the largest amplitude; (3) read the phase across each peak's
    band (between the speeds where the amplitude falls to 25 % of the peak, or the
    valleys, or the data ends): a change of at least ``phase_confirm_deg`` confirms the
    peak, otherwise it is ``'amplitude-only'`` (a structural resonance or a runout
    artefact is possible); (4) look for lag rises of 90 deg or more, away from any peak,
    as ``'phase-only'`` (heavily damped) criticals; (5) estimate the AF by half-power,
    phase and a one-mode fit, and choose the governing one; (6) check the polar loop and
    the sweep rate.

    The reported ``speed_rpm`` of a peak is the amplitude-peak speed, the basis of the
    API 684 half-power AF; the 90-deg-phase speed is kept as ``quadrature_speed_rpm``.

    Sweep-rate rule (our own choice, after the effect F. M. Lewis described): a reading is
    quasi-steady when crossing the half-power band takes at least ``quasi_steady_ratio``
    modal decay times ``1/(zeta*omega_n)``; this equals ``alpha <= 2 zeta^2 omega_n^2 /
    ratio`` for an angular acceleration ``alpha``. In SDOF sweeps integrated with
    :func:`scipy.integrate.solve_ivp` (zeta 0.02-0.1) the apparent peak moved by about
    19 % of the half-power bandwidth at ratio 10, 10 % at 20 and 7 % at 30, with the peak
    amplitude within 1-2 %; hence the default 20. Faster sweeps raise
    :class:`rundash.errors.SweepRateWarning` and a note on the critical.

    Parameters
    ----------
    speed_rpm : array_like, shape (n,)
        Shaft speed in rpm, any order (per revolution or per block).
    vector : array_like of complex, shape (n,)
        Slow-roll-compensated 1X phasors (see :mod:`rundash.conventions`).
    time_s : array_like, shape (n,), optional
        Time of each point in seconds from the record's start, for the sweep rate.
    amplitude_factor : float
        Amplitude reported = ``amplitude_factor * |c|``: 2.0 for p-p (proximity probes),
        1.0 for peak (velocity).
    direction : {'run-up', 'coast-down'}
        Run direction of this segment (a label; the data are analysed against speed).
    min_prominence, min_height : float
        Peak acceptance, fractions of the peak's own height and of the largest amplitude.
    phase_confirm_deg : float
        Lag change across the band that confirms a peak (with the lag at the peak 30 to
        170 deg above the baseline). A lightly damped isolated mode shows about 180 deg;
        a mode merged with a neighbour, whose band starts at the valley between them,
        shows less (73 deg at disk1_X of the two-disk reference rotor), hence 60.
    bin_rpm, smooth_rpm : float, optional
        Bin width and smoothing window in rpm; default automatic (bins: the data spacing
        or 1/4000 of the range; smoothing: 0.4 % of the top speed, only if the data are
        noisy; 0 disables smoothing).
    critically_damped_af : float
        Modes with a governing AF below this are critically damped (no margin required).
    quasi_steady_ratio : float
        See the sweep-rate rule above.
    fit : bool
        Run the one-mode fit per critical.
    amplitude_floor : float or array_like, shape (n,), optional
        A bound on the error of ``|c|`` per point that the scatter does not show because
        it does not average out between neighbouring revolutions, in the units of ``|c|``
        (before ``amplitude_factor``). For slow-roll-compensated vectors read against a
        sample-quantised tach it is the uncompensated amplitude times the angle
        uncertainty of the reference events in radians: an angle error rotates the
        measured vector but not the subtracted slow-roll vector. A peak must rise above
        its base by more than twice the floor (the bound at the peak and at its base);
        default none.
    measure : {'displacement', 'velocity', 'acceleration'}
        What the vectors measure. Velocity and acceleration are integrated to the
        displacement-equivalent 1X (divided by ``j omega`` once or twice) before anything
        is read: their extra factor of speed moves the peak up (closed form for an SDOF
        unbalance response, peak of ``r^3 / |1 - r^2 + 2 j zeta r|`` at
        ``r^2 = 2 - 4 zeta^2 - sqrt(1 - 16 zeta^2 + 16 zeta^4)``, against
        ``r^2 = 1 / (1 - 2 zeta^2)`` for displacement; 1.1 % apart at zeta 0.1), and the
        AF and the phase are the displacement response's. Reported amplitudes and lags
        stay those of the measured quantity at the peak speed.

    Returns
    -------
    tuple of Critical
        Sorted by speed; empty when the run shows no resonance.

    Warns
    -----
    SweepRateWarning
        When a band is crossed too fast for a quasi-steady reading.

    References
    ----------
    API RP 684, 2nd ed., 2005 (half-power AF, phase behaviour through a critical; from
    memory). F. M. Lewis, "Vibration during acceleration through a critical speed",
    Trans. ASME 54 (1932) 253-261.

    Examples
    --------
    >>> import numpy as np
    >>> from rundash.analysis.amplification import unbalance_response
    >>> n = np.linspace(300, 6000, 4000)
    >>> crit, = find_criticals(n, 5 * unbalance_response(n, 3000, 0.05))
    >>> crit.classification, round(crit.peak_speed_rpm), round(crit.half_power.af, 1)
    ('confirmed', 3008, 9.9)
    """
    s = np.asarray(speed_rpm, dtype=float)
    v = np.asarray(vector, dtype=complex)
    if s.ndim != 1 or s.size < 20:
        raise AnalysisError(invalid_value("speed_rpm", f"shape {s.shape}", "a 1-D array of at least 20 speeds"))
    if v.shape != s.shape:
        raise AnalysisError(invalid_value("vector", f"shape {v.shape}", f"the shape of speed_rpm {s.shape}"))
    t = None
    if time_s is not None:
        t = np.asarray(time_s, dtype=float)
        if t.shape != s.shape:
            raise AnalysisError(invalid_value("time_s", f"shape {t.shape}", f"the shape of speed_rpm {s.shape}"))
    if direction not in ("run-up", "coast-down"):
        raise AnalysisError(invalid_value("direction", direction, "'run-up' or 'coast-down'"))
    if not amplitude_factor > 0:
        raise AnalysisError(invalid_value("amplitude_factor", amplitude_factor, "a positive factor (2.0 p-p, 1.0 peak)"))
    for name, val in (("min_prominence", min_prominence), ("min_height", min_height)):
        if not 0 <= val < 1:
            raise AnalysisError(invalid_value(name, val, "a fraction in [0, 1)"))
    floor = None
    if amplitude_floor is not None:
        floor = np.broadcast_to(np.asarray(amplitude_floor, dtype=float), s.shape) \
            if np.ndim(amplitude_floor) == 0 else np.asarray(amplitude_floor, dtype=float)
        if floor.shape != s.shape or not np.all(np.isfinite(floor) & (floor >= 0)):
            raise AnalysisError(invalid_value("amplitude_floor", f"shape {floor.shape}",
                                              f"finite values >= 0, a scalar or shape {s.shape}"))
    good = np.isfinite(s) & np.isfinite(v.real) & np.isfinite(v.imag) & (s > 0)
    if t is not None:
        good &= np.isfinite(t)
    if not good.all():  # a copy of the points only when some are dropped
        t = None if t is None else t[good]
        s, v = s[good], v[good]
        if floor is not None:
            floor = floor[good]
    del good
    if s.size < 20 or np.ptp(s) <= 0:
        raise AnalysisError(invalid_value("speed_rpm", f"{s.size} finite points", "at least 20 finite points over a speed range"))
    if measure not in _INTEGRATIONS:
        raise AnalysisError(invalid_value("measure", measure, ", ".join(map(repr, _INTEGRATIONS))))
    k_int = _INTEGRATIONS[measure]
    if k_int:
        jw = (1j * 2.0 * math.pi * s / 60.0) ** k_int
        v = v / jw
        if floor is not None:
            floor = floor / np.abs(jw)
    found = _find(prepare_curve(s, v, float(amplitude_factor), bin_rpm, smooth_rpm, floor), s, t,
                  float(amplitude_factor), direction, min_prominence, min_height,
                  phase_confirm_deg, critically_damped_af, quasi_steady_ratio, fit)
    if k_int:
        found = [_as_measured(c, k_int, measure) for c in found]
    for c in found:
        if c.sweep_note:
            warnings.warn(f"critical at {c.speed_rpm:.0f} rpm: {c.sweep_note}", SweepRateWarning,
                          stacklevel=2)
    return tuple(sorted(found, key=lambda c: c.speed_rpm))


def replicate_criticals(curves, speed_rpm, *, time_s=None, amplitude_factor: float = 2.0,
                        direction: Direction = "run-up", fit: bool = True,
                        near_rpm=(), within_pct: float = 3.0) -> list[tuple[Critical, ...] | None]:
    """For each prepared curve of a bootstrap's replicates
    (:func:`rundash.analysis.response_curve.curves_from_sums` of the points at
    ``speed_rpm`` and ``time_s``, all finite and positive), the criticals
    :func:`find_criticals` with its defaults finds on it, read for a bootstrap: the speed,
    peak amplitude, AF estimates and classification of every critical are those it
    returns; a replicate with one peak leaves out the evidence, polar loop and sweep rate.
    Phase-only criticals are searched for only where one could be the nearest critical
    within ``within_pct`` % of a speed in ``near_rpm``. None for a replicate whose analysis
    failed (:class:`AnalysisError`); no warnings.
    """
    s = np.asarray(speed_rpm, dtype=float)
    t = None if time_s is None else np.asarray(time_s, dtype=float)
    if s.size < 20 or np.ptp(s) <= 0:
        return [None] * len(curves)
    afac = float(amplitude_factor)
    near = (tuple(float(x) for x in near_rpm), float(within_pct))
    out: list[tuple[Critical, ...] | None] = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for curve in curves:
            try:
                found = _find(curve, s, t, afac, direction, 0.05, 0.05, 60.0,
                              CRITICALLY_DAMPED_AF, QUASI_STEADY_RATIO, fit, lean=True, near=near)
            except AnalysisError:
                out.append(None)
                continue
            out.append(tuple(sorted(found, key=lambda c: c.speed_rpm)))
    return out


def _as_measured(c: Critical, k: int, measure: str) -> Critical:
    """A critical found on the displacement-equivalent 1X, with the amplitudes and lags of
    the measured velocity (acceleration) at its speeds: x (j omega)^k, lag - 90 k deg."""
    def scale(rpm):
        return (2.0 * math.pi * rpm / 60.0) ** k

    hp = c.half_power
    pk = c.peak_speed_rpm if c.peak_speed_rpm is not None else c.speed_rpm
    if hp is not None:
        hp = replace(hp, peak_amplitude=hp.peak_amplitude * scale(hp.nc_rpm))
    shift = 90.0 * k
    return replace(
        c, half_power=hp,
        peak_amplitude=None if c.peak_amplitude is None else c.peak_amplitude * scale(pk),
        lag_at_peak_deg=None if c.lag_at_peak_deg is None else (c.lag_at_peak_deg - shift) % 360.0,
        baseline_lag_deg=(c.baseline_lag_deg - shift) % 360.0,
        evidence=c.evidence + (
            f"identified on the displacement-equivalent 1X (the {measure} vector divided by "
            f"{'j omega' if k == 1 else '(j omega)^2'}): the extra factor of speed in a {measure} "
            f"reading moves its own peak above the displacement peak; amplitude and lags "
            f"quoted as measured ({measure})",))


def _find(curve, s, t, afac, direction, min_prominence, min_height, phase_confirm_deg,
          critically_damped_af, quasi_steady_ratio, fit, lean=False, near=None) -> list[Critical]:
    """The criticals of one prepared curve. ``lean`` (bootstrap replicates): peaks read
    for their speed, amplitude, AF and classification only (:func:`_from_peak`); with
    ``near`` (speeds, tolerance in %) the phase-only search runs only when a phase-only
    critical could be the nearest critical to one of those speeds (see
    :func:`_phase_only_needed`)."""
    amp = curve.amp
    idx, prom = peaks_with_prominence(amp, 1e-12 * amp.max())
    # significance: 8 noise sigmas of the smoothed curve, twice the floor
    ok = ((prom >= min_prominence * amp[idx]) & (amp[idx] >= min_height * amp.max())
          & (prom >= 8.0 * curve.noise[idx]) & (prom > 2.0 * curve.floor[idx]))
    keep = idx[ok]

    found: list[Critical] = []
    bands: list[tuple[float, float]] = []
    for i in keep:
        found.append(_from_peak(curve, int(i), s, t, 8.0 * curve.noise[i], phase_confirm_deg, critically_damped_af,
                                quasi_steady_ratio, fit, direction, afac,
                                lean=lean and len(keep) == 1))
        bands.append(found[-1].band_rpm)
    found = drop_beating(found)
    if near is None or _phase_only_needed(found, bands, curve, *near):
        found.extend(_phase_only(curve, bands, s, t, critically_damped_af, quasi_steady_ratio,
                                 fit, direction, afac))
    return found


def _phase_only_needed(found, bands, curve, speeds, tol_pct) -> bool:
    """Whether a phase-only critical could be the nearest critical within ``tol_pct`` % of
    one of ``speeds``. A phase-only critical lies outside every peak band, except for at
    most one grid step above its own band (the modal fit's natural frequency may fall on
    the next grid point): a speed inside a band, that margin kept, whose nearest peak
    critical is closer than the band's edges, cannot have a nearer phase-only one."""
    step = float(curve.speed[1] - curve.speed[0]) if curve.speed.size > 1 else 0.0
    for sp in speeds:
        best = min((abs(c.speed_rpm - sp) for c in found), default=math.inf)
        if not best / sp * 100.0 <= tol_pct:  # as the match is judged (curve_estimate)
            return True
        room = max((min(sp - (b0 + step), b1 - sp) for b0, b1 in bands), default=-1.0)
        if not best < room:
            return True
    return False


def _from_peak(curve, i, s_raw, t_raw, tol, phase_confirm_deg, cd_af, ratio_min, do_fit,
               direction, afac, lean=False) -> Critical:
    """The critical of the peak at ``i``. ``lean`` (a bootstrap replicate with this one
    peak, so no beating to drop): the speed, amplitude, AF and classification are read as
    always; the polar loop, the evidence and the sweep rate are not, nor the phase AF
    unless it governs."""
    sp, amp, lag = curve.speed, curve.amp, curve.lag
    rel_tol = tol / amp[i] if amp[i] > 0 else 0.0
    hp = half_power(sp, amp, peak_index=i, rise_tolerance=rel_tol,
                    peak_fit_fraction=0.95 if curve.smoothed else None)
    if curve.smoothed and hp.determinable:
        side = stalled_side(curve, i, hp)
        if side:
            hp = HalfPower(None, hp.n1_rpm if side == "high" else None,
                           hp.n2_rpm if side == "low" else None, hp.nc_rpm, hp.peak_amplitude,
                           False, f"not determinable by half-power: {side} side merges with a "
                           f"neighbouring peak (the amplitude stalls on a plateau before "
                           f"falling to the half-power level)")
    lo, hi = band_edges(amp, i, 0.25, tol)
    band = (float(sp[lo]), float(sp[hi]))
    evidence = [f"amplitude peak of {hp.peak_amplitude:.3g} at {hp.nc_rpm:.0f} rpm"]
    change = float(lag[hi] - lag[lo])
    mode = None
    if do_fit:
        z0 = 0.5 / hp.af if hp.af else 0.1
        mode = fit_band(curve, lo, hi, (hp.nc_rpm * math.sqrt(max(1 - 2 * z0 * z0, 0.5)), z0))
    if mode is not None:
        base = float(-np.degrees(np.angle(mode.residue)))
        base_src = "the modal fit"
    else:
        base = float(lag[lo])
        base_src = "the low edge of the band"
    base = base + 360.0 * round((lag[lo] - base) / 360.0)
    if mode is not None and lag[lo] - base > 120:  # fit residue and band edge disagree wildly
        base = float(lag[lo])
        base_src = "the low edge of the band"
    lag_pk = float(np.interp(hp.nc_rpm, sp, lag))
    rel_pk = lag_pk - base
    if lean:
        return _lean_peak(curve, i, hp, mode, base, band, change, lag_pk, rel_pk, lo, hi,
                          phase_confirm_deg, cd_af, direction, afac)
    quad = quadrature_speed(curve, lo, hi, base, hp.nc_rpm)
    if hi - lo >= 2:
        pa = phase_af(sp[lo:hi + 1], lag[lo:hi + 1], nc_rpm=quad or hp.nc_rpm, baseline_deg=base)
    else:
        pa = PhaseAF(None, None, None, None, None, None, None, base, "band too short")
    evidence.append(f"phase lag changes by {change:.0f} deg across the band "
                    f"{band[0]:.0f}-{band[1]:.0f} rpm")
    evidence.append(f"lag at the peak is {rel_pk:.0f} deg above the below-resonance baseline "
                    f"(baseline from {base_src})")
    if quad is not None:
        evidence.append(f"lag is 90 deg above the baseline at {quad:.0f} rpm")
    phase_ok = change >= phase_confirm_deg and 30.0 <= rel_pk <= 170.0
    classification = "confirmed" if phase_ok else "amplitude-only"
    if not phase_ok:
        evidence.append("the phase does not confirm a rotor critical: a structural resonance "
                        "or a runout artefact is possible")
    loop, loop_txt = polar_loop(curve.vector[lo:hi + 1])
    if loop_txt:
        evidence.append(loop_txt)
    af, method, reason = _governing(hp, mode, pa)
    evidence.append(f"AF {af:.2f} by {method}" if af is not None else "AF not determinable")
    if not hp.determinable:
        evidence.append(hp.reason)
    zeta = mode.zeta if mode is not None else (0.5 / af if af else None)
    hb = (hp.n1_rpm, hp.n2_rpm) if hp.determinable else band
    rate, ratio, note = sweep_reading(s_raw, t_raw, hb, zeta, hp.nc_rpm, ratio_min)
    cd = _closing_evidence(evidence, rate, note, af, cd_af)
    confidence = _confidence(classification, loop, hp.determinable or mode is not None, note)
    return Critical(hp.nc_rpm, "amplitude peak", hp.nc_rpm, quad, hp.peak_amplitude, change,
                    float(lag_pk % 360.0), rel_pk, float(base % 360.0), band, hp, pa, mode,
                    af, method, reason, cd, rate, ratio, note, loop, classification,
                    confidence, tuple(evidence), direction, afac)


def _lean_peak(curve, i, hp, mode, base, band, change, lag_pk, rel_pk, lo, hi,
               phase_confirm_deg, cd_af, direction, afac) -> Critical:
    """:func:`_from_peak`'s readings of a bootstrap replicate (see its ``lean``)."""
    sp, lag = curve.speed, curve.lag
    quad = pa = None
    if not hp.determinable and mode is None:  # the phase AF may govern: read it
        quad = quadrature_speed(curve, lo, hi, base, hp.nc_rpm)
        if hi - lo >= 2:
            pa = phase_af(sp[lo:hi + 1], lag[lo:hi + 1], nc_rpm=quad or hp.nc_rpm,
                          baseline_deg=base)
    if pa is None:
        pa = PhaseAF(None, None, None, None, None, None, None, base, "not read")
    phase_ok = change >= phase_confirm_deg and 30.0 <= rel_pk <= 170.0
    af, method, reason = _governing(hp, mode, pa)
    return Critical(hp.nc_rpm, "amplitude peak", hp.nc_rpm, quad, hp.peak_amplitude, change,
                    float(lag_pk % 360.0), rel_pk, float(base % 360.0), band, hp, pa, mode,
                    af, method, reason, af is not None and af < cd_af, None, None, "", None,
                    "confirmed" if phase_ok else "amplitude-only", "low", (), direction, afac)


def _closing_evidence(evidence: list, rate, note: str, af, cd_af: float) -> bool:
    """Append the sweep-rate and critically-damped sentences; True when critically damped."""
    if rate is not None:
        evidence.append(f"sweep rate through the band {rate:+.1f} rpm/s")
    if note:
        evidence.append(note)
    cd = af is not None and af < cd_af
    if cd:
        evidence.append(f"AF below {cd_af:g}: critically damped, no separation margin required")
    return cd


def _confidence(classification, loop, af_known, sweep_note) -> str:
    if classification != "confirmed":
        return "low"
    score = int(bool(loop)) + int(bool(af_known)) + int(not sweep_note)
    return "high" if score == 3 else "medium"


def _phase_only(curve, bands, s_raw, t_raw, cd_af, ratio_min, do_fit, direction, afac):
    """Lag rises of >= 90 deg over a band with no prominent amplitude peak.

    The smoothed vectors where the amplitude is well above the noise are averaged into
    2 %-wide logarithmic speed bins; a contiguous rise of the bin lags (slope above a
    quarter of its steepest value) totalling at least 90 deg, clear of every peak band,
    is a phase-only critical.
    """
    sp, amp = curve.speed, curve.amp
    reliable = amp >= np.maximum(0.1 * amp.max(), 10 * curve.noise)
    if np.count_nonzero(reliable) < 12:
        return []
    s_ok, v_ok = sp[reliable], curve.vector[reliable]
    k = np.floor(np.log(s_ok / s_ok[0]) / math.log(1.02)).astype(int)
    cnt = np.bincount(k)
    filled = cnt > 0
    if np.count_nonzero(filled) < 8:
        return []
    vc = (np.bincount(k, v_ok.real) + 1j * np.bincount(k, v_ok.imag))[filled] / cnt[filled]
    nc_ = np.exp(np.bincount(k, np.log(s_ok))[filled] / cnt[filled])
    lag_c = np.degrees(np.unwrap(-np.angle(vc)))
    slope = np.gradient(lag_c, np.log(nc_))
    slope = np.convolve(np.pad(slope, 2, mode="edge"), np.ones(5) / 5, mode="valid")
    out = []
    order = np.argsort(slope)[::-1]
    taken = np.zeros(slope.size, bool)
    for i in order:
        if slope[i] < 60.0 or taken[i]:  # 60 deg per unit ln N: zeta up to about 1
            break
        lo = hi = i
        while lo > 0 and slope[lo - 1] > 0.25 * slope[i] and not taken[lo - 1]:
            lo -= 1
        while hi < slope.size - 1 and slope[hi + 1] > 0.25 * slope[i] and not taken[hi + 1]:
            hi += 1
        taken[lo:hi + 1] = True
        change = float(lag_c[hi] - lag_c[lo])
        band = (float(nc_[lo]), float(nc_[hi]))
        if change < 90.0 or any(band[0] <= b1 and band[1] >= b0 for b0, b1 in bands):
            continue
        j0, j1 = (int(np.searchsorted(sp, b)) for b in band)
        j1 = min(j1, sp.size - 1)
        mode = fit_band(curve, j0, j1, (float(nc_[i]), 0.5)) if do_fit else None
        base = float(-np.degrees(np.angle(mode.residue))) if mode is not None else float(lag_c[lo])
        base = base + 360.0 * round((lag_c[lo] - base) / 360.0)
        rel = lag_c[lo:hi + 1] - base
        quad = None
        up = np.nonzero((rel[:-1] < 90.0) & (rel[1:] >= 90.0))[0]
        if up.size:
            q = int(up[0])
            quad = float(np.exp(np.interp(90.0, rel[q:q + 2], np.log(nc_[lo + q:lo + q + 2]))))
        nc = quad if quad is not None else float(nc_[i])
        basis = "90 deg phase"
        if mode is not None:
            # the fitted mode's 90 deg point is fn, unaffected by the constant left by
            # slow-roll compensation that shifts a slowly rising measured lag
            nc, basis = mode.fn_rpm, "90 deg phase (modal fit)"
        pa = phase_af(nc_[lo:hi + 1], lag_c[lo:hi + 1], nc_rpm=nc, baseline_deg=base) \
            if hi - lo >= 2 else PhaseAF(None, None, None, None, None, None, None, base, "band too short")
        af, method, reason = _governing(None, mode, pa)
        zeta = mode.zeta if mode is not None else (0.5 / af if af else None)
        rate, ratio, note = sweep_reading(s_raw, t_raw, band, zeta, nc, ratio_min)
        ev = [f"phase lag rises by {change:.0f} deg over {band[0]:.0f}-{band[1]:.0f} rpm with no "
              f"prominent amplitude peak: a heavily damped critical",
              f"measured lag is 90 deg above the baseline at {quad:.0f} rpm" if quad is not None
              else f"steepest lag rise at {float(nc_[i]):.0f} rpm",
              f"modal fit: natural frequency {mode.fn_rpm:.0f} rpm, damping ratio {mode.zeta:.2f}"
              if mode is not None else "no usable modal fit",
              f"AF {af:.2f} by {method}" if af is not None else "AF not determinable"]
        cd = _closing_evidence(ev, rate, note, af, cd_af)
        out.append(Critical(nc, basis, None, quad, None, change, None, None,
                            float(base % 360.0), band, None, pa, mode, af, method, reason, cd,
                            rate, ratio, note, None, "phase-only", "low", tuple(ev), direction,
                            afac))
        bands = [*bands, band]
    return out


# --------------------------------------------------------------------------- comparisons


# pairing and the edges of a run, importable from here as before the split
from rundash.analysis.critical_pairs import (  # noqa: E402
    CriticalPair, combine_bearing, compare_directions,
)
from rundash.analysis.run_edges import RisingAtTop, first_candidate_rpm, rising_at_top  # noqa: E402
