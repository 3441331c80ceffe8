"""Run comparison: what changed between runs of one machine, and is the change real?

Pure numpy/scipy. Inputs are one probe's per-revolution 1X phasors in one run direction
(see :mod:`rundash.conventions`: ``c = |c| exp(-i lag)``), as
:func:`rundash.analysis.criticals.find_criticals` takes them. Every number compared
carries a one-sigma uncertainty from a bootstrap over revolutions, and a change counts
as *significant* only when it is larger than its uncertainty by the rule below, and is
*flagged* (counted as a change) only when it is significant and at least its engineering
floor (:mod:`rundash.analysis.significance`, each floor with its source).

Public functions
----------------
estimate_curve      criticals of one probe and direction, with bootstrap uncertainties
compare_curves      match the criticals of two estimates and report their shifts
vector_mean         mean of complex vectors with its standard error (e.g. slow roll)
compare_vectors     change of a mean vector (e.g. the slow-roll vector) between runs
shift               one quantity's change with its combined uncertainty

Significance rule
-----------------
A change ``d = b - a`` with one-sigma uncertainties ``sa`` and ``sb`` (independent runs)
is significant when ``|d| > k * sqrt(sa^2 + sb^2)`` with ``k = 2`` by default, about the
95 % two-sided level for Gaussian errors (common practice, no source). A quantity whose
uncertainty is unknown is never called significant.

Uncertainty: the dependent wild bootstrap
-----------------------------------------
The per-revolution vectors are split into a smooth part (a quadratic Savitzky-Golay fit
in time order over ``smooth_revs`` revolutions) and residuals. Each replicate keeps the
smooth part and multiplies the residuals, in blocks of ``block_revs`` revolutions, by a
random unit phasor, so the replicate keeps the speed of every revolution, the noise
level and its short-range correlation; a random constant offset of the size of the
slow-roll vector's standard error is added too (the compensation subtracted that vector
from every revolution, so its error moves the whole curve). The whole estimator (binning, smoothing, peak,
half-power, phase) is re-run on each replicate; the spread of the replicates is the
uncertainty. It covers the noise in the data, not a bias the estimator shares across
runs (the sweep-rate shift of the apparent peak, F. M. Lewis 1932, is one such bias:
compare like with like).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from typing import Literal, Sequence

import numpy as np
from scipy import signal

from rundash.analysis.criticals import Critical, find_criticals
from rundash.analysis.significance import amplitude_floor, af_floor, phase_floor, speed_floor
from rundash.analysis.vectors import mean_vector_near
from rundash.errors import AnalysisError, invalid_value

Direction = Literal["run-up", "coast-down"]

#: Default k of the significance rule ``|d| > k * sigma_combined``.
K_SIGMA = 2.0
#: Sweep rates of two runs differing by more than this fraction get a note.
SWEEP_RATE_TOLERANCE = 0.25


# ----------------------------------------------------------------------------- results
@dataclass(frozen=True)
class Shift:
    """The change of one quantity between run ``a`` and run ``b``.

    ``delta = b - a`` (for phase lags wrapped to (-180, 180] deg), ``delta_pct = 100
    delta / a`` (None for phases or when ``a`` is 0), ``sigma`` the combined one-sigma
    uncertainty ``sqrt(sa^2 + sb^2)``, ``significant`` whether ``|delta| > k sigma``
    (None when a value or an uncertainty is missing), ``k`` the factor used.
    """

    quantity: str
    units: str
    a: float | None
    b: float | None
    a_std: float | None
    b_std: float | None
    delta: float | None
    delta_pct: float | None
    sigma: float | None
    significant: bool | None
    k: float
    floor: float | None = None
    floor_source: str = ""

    @property
    def flagged(self) -> bool:
        """Significant and at least the engineering floor (:mod:`rundash.analysis.
        significance`); a change without a floor is flagged when significant."""
        if not self.significant:
            return False
        return self.floor is None or abs(self.delta) >= self.floor

    def to_json_dict(self) -> dict:
        out = {k: getattr(self, k) for k in (
            "quantity", "units", "a", "b", "a_std", "b_std", "delta", "delta_pct", "sigma",
            "significant", "k", "floor", "floor_source")}
        out["flagged"] = self.flagged
        return out


@dataclass(frozen=True)
class CriticalEstimate:
    """One critical of one probe and direction, with bootstrap uncertainties.

    Speeds in rpm, amplitudes in the caller's unit times ``amplitude_factor`` (e.g. um
    p-p). ``*_std`` are one-sigma bootstrap spreads (None when fewer than 5 replicates
    gave the value). ``af`` is the governing AF (``af_method`` says which estimate), and
    ``af_half_power`` the API 684 one (None when not determinable). ``n_found`` counts the
    replicates in which the critical was found again (within the match tolerance),
    ``n_af`` those that gave an AF by the same method; ``n_boot`` the replicates run.
    ``af_fit_std`` is the modal fit's own covariance estimate, kept for reference (it
    treats smoothed, correlated bins as independent and reads low).
    """

    speed_rpm: float
    speed_std_rpm: float | None
    af: float | None
    af_std: float | None
    af_method: str
    af_half_power: float | None
    af_half_power_std: float | None
    af_fit_std: float | None
    peak_amplitude: float | None
    peak_amplitude_std: float | None
    classification: str
    confidence: str
    sweep_rate_rpm_s: float | None
    n_found: int
    n_af: int
    n_boot: int
    critical: Critical

    @property
    def stable(self) -> bool:
        """Found again in at least 90 % of the replicates."""
        return self.n_boot == 0 or self.n_found >= 0.9 * self.n_boot

    @property
    def reproducible(self) -> bool:
        """Found again in at least half the replicates (else most likely a noise bump)."""
        return self.n_boot == 0 or self.n_found >= 0.5 * self.n_boot


@dataclass(frozen=True)
class PhasePoint:
    """Mean 1X vector within +-``width_pct`` of a chosen speed, with bootstrap spreads."""

    speed_rpm: float
    lag_deg: float | None
    lag_std_deg: float | None
    amplitude: float | None
    amplitude_std: float | None
    n_revs: int


@dataclass(frozen=True)
class CurveEstimate:
    """Result of :func:`estimate_curve`: criticals and phase points of one curve."""

    direction: str
    criticals: tuple[CriticalEstimate, ...]
    phase_points: tuple[PhasePoint, ...]
    sweep_rate_rpm_s: float | None
    speed_range_rpm: tuple[float, float]
    n_revs: int
    n_boot: int
    amplitude_factor: float


@dataclass(frozen=True)
class CriticalMatch:
    """A critical of run ``a`` matched with one of run ``b`` (either may be missing)."""

    a: CriticalEstimate | None
    b: CriticalEstimate | None
    speed: Shift | None
    af: Shift | None
    peak_amplitude: Shift | None
    changed: bool
    hints: tuple[str, ...]
    notes: tuple[str, ...]


@dataclass(frozen=True)
class CurveComparison:
    """Result of :func:`compare_curves`.

    ``like_with_like`` is False when the runs differ in direction or in sweep rate
    (``notes`` say how); ``verdict`` is ``'changed'`` when any shift is flagged
    (significant and at least its engineering floor), else ``'no significant change'``.
    """

    matches: tuple[CriticalMatch, ...]
    phase: tuple[Shift, ...]
    like_with_like: bool
    notes: tuple[str, ...]
    hints: tuple[str, ...]
    verdict: str


@dataclass(frozen=True)
class VectorMean:
    """Mean complex vector and its standard error (per component, isotropic)."""

    mean: complex
    std_error: float
    n: int

    @property
    def amplitude(self) -> float:
        return abs(self.mean)

    @property
    def lag_deg(self) -> float:
        return float(np.mod(-np.degrees(np.angle(self.mean)), 360.0))


@dataclass(frozen=True)
class VectorChange:
    """Change of a mean vector: ``|b - a|`` against ``k`` times its uncertainty.

    ``delta_amplitude`` is the length of the complex difference (same unit as the
    vectors, times the amplitude factor given), ``sigma`` its one-sigma uncertainty
    (radial, ``sqrt(se_a^2 + se_b^2)``), ``significant`` whether ``delta > k sigma``.
    """

    a: VectorMean
    b: VectorMean
    delta_amplitude: float
    sigma: float
    significant: bool
    k: float
    hint: str
    material: bool = False


# ----------------------------------------------------------------------------- helpers
def shift(quantity: str, a: float | None, b: float | None, a_std: float | None,
          b_std: float | None, *, units: str = "", k: float = K_SIGMA,
          circular: bool = False, floor=None) -> Shift:
    """The change ``b - a`` of one quantity with its combined uncertainty.

    Parameters
    ----------
    quantity, units : str
        Labels carried into the result.
    a, b : float or None
        The values in run ``a`` and run ``b``.
    a_std, b_std : float or None
        Their one-sigma uncertainties (independent runs).
    k : float
        Factor of the significance rule ``|b - a| > k sqrt(a_std^2 + b_std^2)``.
    circular : bool
        The quantity is an angle in degrees: the change is wrapped to (-180, 180].
    floor : Floor or None
        The engineering floor (:mod:`rundash.analysis.significance`): the change is
        ``flagged`` only when significant and at least the floor.

    Returns
    -------
    Shift

    Examples
    --------
    >>> s = shift("critical speed", 3000.0, 2910.0, 10.0, 12.0, units="rpm")
    >>> round(s.delta), round(s.delta_pct, 1), round(s.sigma, 1), s.significant
    (-90, -3.0, 15.6, True)
    """
    if not (math.isfinite(k) and k > 0):
        raise AnalysisError(invalid_value("k", k, "a positive factor"))
    if a is None or b is None or not (math.isfinite(a) and math.isfinite(b)):
        return Shift(quantity, units, a, b, a_std, b_std, None, None, None, None, k,
                     floor.value if floor else None, floor.source if floor else "")
    d = b - a
    if circular:
        d = (d + 180.0) % 360.0 - 180.0
        if d == -180.0:
            d = 180.0
    pct = None if circular or a == 0 else 100.0 * d / a
    sig = None
    significant = None
    if a_std is not None and b_std is not None and math.isfinite(a_std) and math.isfinite(b_std):
        sig = math.hypot(a_std, b_std)
        significant = bool(abs(d) > k * sig)
    return Shift(quantity, units, a, b, a_std, b_std, d, pct, sig, significant, k,
                 floor.value if floor else None, floor.source if floor else "")


def vector_mean(vectors) -> VectorMean:
    """Mean of complex vectors and its standard error.

    The per-component standard error is ``sqrt(S / (2 n (n - 1)))`` with ``S`` the sum
    of ``|v - mean|^2``: the scatter is taken as isotropic (the same in both
    components), so one number describes the uncertainty of the mean in any direction.

    Parameters
    ----------
    vectors : array_like of complex, shape (n,)
        At least 2 vectors (e.g. the uncompensated 1X of each revolution in the
        slow-roll window), in any amplitude unit.

    Returns
    -------
    VectorMean

    Examples
    --------
    >>> vm = vector_mean([1 + 1j, 1 - 1j, 3 + 1j, 3 - 1j])
    >>> vm.mean, round(vm.std_error, 4), vm.n
    ((2+0j), 0.5774, 4)
    """
    v = np.asarray(vectors, dtype=complex).ravel()
    v = v[np.isfinite(v.real) & np.isfinite(v.imag)]
    if v.size < 2:
        raise AnalysisError(invalid_value("vectors", f"{v.size} finite vectors", "at least 2"))
    m = complex(v.mean())
    var_c = float(np.sum(np.abs(v - m) ** 2)) / (v.size - 1)  # E|v - m|^2, both components
    return VectorMean(m, math.sqrt(var_c / 2.0 / v.size), int(v.size))


def compare_vectors(a: VectorMean, b: VectorMean, *, k: float = K_SIGMA,
                    min_fraction: float = 0.1, what: str = "slow-roll vector"
                    ) -> VectorChange:
    """Whether a mean vector changed between two runs.

    The difference ``b - a`` has per-component standard error ``s = sqrt(se_a^2 +
    se_b^2)``; its length is significant when above ``k s`` (for k = 2 a zero true change
    exceeds it with probability exp(-2) = 13.5 % under isotropic Gaussian errors — the
    length of a 2-D Gaussian is Rayleigh-distributed; use ``k = 3`` for 1.1 %). A change
    of the slow-roll vector is a hint of a runout change (probe track, a scratch) or a
    bow (common practice, no source). Very quiet data make tiny changes significant;
    the hint is given only when the change is also *material*: at least
    ``min_fraction`` of the larger of the two vectors (our own choice, default 10 %).

    Examples
    --------
    >>> a, b = VectorMean(3 + 0j, 0.1, 50), VectorMean(3 + 2j, 0.1, 50)
    >>> c = compare_vectors(a, b)
    >>> round(c.delta_amplitude, 2), round(c.sigma, 3), c.significant
    (2.0, 0.141, True)
    """
    if not (math.isfinite(k) and k > 0):
        raise AnalysisError(invalid_value("k", k, "a positive factor"))
    d = abs(b.mean - a.mean)
    sig = math.hypot(a.std_error, b.std_error)
    significant = bool(d > k * sig)
    material = significant and d >= min_fraction * max(abs(a.mean), abs(b.mean))
    hint = ""
    if material:
        hint = (f"hint: the {what} changed by {d:.3g} (more than {k:g} sigma, sigma "
                f"{sig:.2g}): a changed runout (probe track) or a rotor bow is possible")
    return VectorChange(a, b, float(d), float(sig), significant, float(k), hint, material)


def _residual_model(t: np.ndarray, v: np.ndarray, smooth_revs: int):
    """Smooth part and scaled residuals of per-revolution vectors in time order."""
    n = v.size
    w = min(smooth_revs | 1, n - (1 - n % 2))
    if w < 5:
        return v.copy(), np.zeros_like(v)
    smooth = (signal.savgol_filter(v.real, w, 2, mode="interp")
              + 1j * signal.savgol_filter(v.imag, w, 2, mode="interp"))
    h0 = float(signal.savgol_coeffs(w, 2)[w // 2])  # hat-matrix diagonal at the centre
    return smooth, (v - smooth) / math.sqrt(1.0 - h0)


def _std(values: list[float], min_n: int = 5) -> float | None:
    x = np.asarray([u for u in values if u is not None and math.isfinite(u)], dtype=float)
    if x.size < min_n:
        return None
    return float(np.std(x, ddof=1))


def _circ_std_deg(values: list[float], min_n: int = 5) -> float | None:
    x = np.asarray([u for u in values if u is not None and math.isfinite(u)], dtype=float)
    if x.size < min_n:
        return None
    z = np.exp(1j * np.radians(x))
    ref = np.angle(z.mean())
    dev = np.angle(z * np.exp(-1j * ref))
    return float(np.degrees(np.std(dev, ddof=1)))


def _phase_point(s, v, afac, speed, width_pct):
    m, n = mean_vector_near(s, v, speed, width_pct=width_pct)
    if m is None:
        return None, None, 0
    return float(np.mod(-np.degrees(np.angle(m)), 360.0)), float(afac * abs(m)), n


def _nearest(crits, speed, tol_pct):
    best, best_d = None, None
    for c in crits:
        d = abs(c.speed_rpm - speed) / speed * 100.0
        if d <= tol_pct and (best_d is None or d < best_d):
            best, best_d = c, d
    return best


# ----------------------------------------------------------------------------- estimate
def estimate_curve(speed_rpm, vector, *, time_s=None, amplitude_factor: float = 2.0,
                   direction: Direction = "run-up", phase_speeds_rpm: Sequence[float] = (),
                   phase_width_pct: float = 0.5, n_boot: int = 100, block_revs: int = 4,
                   smooth_revs: int = 21, match_tolerance_pct: float = 3.0,
                   offset_std: float = 0.0, seed: int = 0) -> CurveEstimate:
    """Critical speeds of one probe and direction, each with bootstrap uncertainties.

    The criticals are those of :func:`rundash.analysis.criticals.find_criticals` with
    its defaults (the same the run's findings use). The uncertainty of each critical's
    speed, AF and peak amplitude, and of the lag and amplitude at ``phase_speeds_rpm``,
    is the spread over ``n_boot`` replicates of the dependent wild bootstrap described
    in the module docstring.

    Parameters
    ----------
    speed_rpm : array_like, shape (n,)
        Shaft speed of each revolution (or block) in rpm, in time order.
    vector : array_like of complex, shape (n,)
        Slow-roll-compensated 1X phasors (|c| peak units; see :mod:`rundash.conventions`).
    time_s : array_like, shape (n,), optional
        Time of each point in s (for the sweep rate); default: the index order.
    amplitude_factor : float
        Reported amplitude = factor x |c| (2.0 for p-p, 1.0 for peak).
    direction : {'run-up', 'coast-down'}
    phase_speeds_rpm : sequence of float
        Speeds at which the mean lag and amplitude within +-``phase_width_pct`` % are
        read (e.g. the top speed, or a speed below the first critical).
    n_boot : int
        Bootstrap replicates (0: no uncertainties). 100 gives the one-sigma spread to
        about 7 % (relative standard error 1/sqrt(2 (n - 1))).
    block_revs : int
        Revolutions sharing one random phasor (keeps short-range correlation).
    smooth_revs : int
        Window of the smooth part, in revolutions (odd; quadratic Savitzky-Golay).
    match_tolerance_pct : float
        A replicate's critical within this percentage of the original speed is the same
        critical found again.
    offset_std : float
        One-sigma uncertainty (per component, |c| units) of a constant vector that was
        subtracted from every revolution: the standard error of the slow-roll vector
        (:func:`vector_mean`). Each replicate adds a random offset of that size. An
        error in the slow-roll vector moves the whole compensated curve and with it the
        peak, the AF and the phase; leaving it out makes the uncertainty read low.
    seed : int
        Seed of the random generator (results are reproducible).

    Returns
    -------
    CurveEstimate

    References
    ----------
    C. F. J. Wu, "Jackknife, bootstrap and other resampling methods in regression
    analysis", Annals of Statistics 14 (1986) 1261-1295 (wild bootstrap). X. Shao, "The
    dependent wild bootstrap", J. American Statistical Association 105 (2010) 218-235.
    B. Efron, R. J. Tibshirani, "An Introduction to the Bootstrap", Chapman & Hall,
    1993 (standard errors by resampling).

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> n = np.linspace(300, 6000, 3000)
    >>> r = n / 3000
    >>> c = 5 * r**2 / (1 - r**2 + 0.1j * r) + 0.05 * (rng.standard_normal(3000) + 1j * rng.standard_normal(3000))
    >>> est = estimate_curve(n, c, n_boot=20)
    >>> ce, = est.criticals
    >>> round(ce.speed_rpm, -1), ce.speed_std_rpm < 5, ce.n_found
    (3010.0, True, 20)
    """
    s = np.asarray(speed_rpm, dtype=float)
    v = np.asarray(vector, dtype=complex)
    if s.ndim != 1 or s.size < 20:
        raise AnalysisError(invalid_value("speed_rpm", f"shape {s.shape}",
                                          "a 1-D array of at least 20 speeds"))
    if v.shape != s.shape:
        raise AnalysisError(invalid_value("vector", f"shape {v.shape}",
                                          f"the shape of speed_rpm {s.shape}"))
    t = np.arange(s.size, dtype=float) if time_s is None else np.asarray(time_s, dtype=float)
    if t.shape != s.shape:
        raise AnalysisError(invalid_value("time_s", f"shape {t.shape}",
                                          f"the shape of speed_rpm {s.shape}"))
    if not (isinstance(n_boot, (int, np.integer)) and n_boot >= 0):
        raise AnalysisError(invalid_value("n_boot", n_boot, "an integer >= 0"))
    if not (isinstance(block_revs, (int, np.integer)) and block_revs >= 1):
        raise AnalysisError(invalid_value("block_revs", block_revs, "an integer >= 1"))
    if not (isinstance(smooth_revs, (int, np.integer)) and smooth_revs >= 5):
        raise AnalysisError(invalid_value("smooth_revs", smooth_revs, "an integer >= 5"))
    if not match_tolerance_pct > 0:
        raise AnalysisError(invalid_value("match_tolerance_pct", match_tolerance_pct,
                                          "a positive percentage"))
    if not phase_width_pct > 0:
        raise AnalysisError(invalid_value("phase_width_pct", phase_width_pct,
                                          "a positive percentage"))
    if not (math.isfinite(offset_std) and offset_std >= 0):
        raise AnalysisError(invalid_value("offset_std", offset_std, "a standard error >= 0"))
    good = np.isfinite(s) & np.isfinite(t) & np.isfinite(v.real) & np.isfinite(v.imag)
    order = np.argsort(t[good], kind="stable")
    s, v, t = s[good][order], v[good][order], t[good][order]
    afac = float(amplitude_factor)
    kw = dict(time_s=t, amplitude_factor=afac, direction=direction)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        crits = find_criticals(s, v, **kw)
    use_fit = any(c.af_method not in ("half-power",) for c in crits)
    speeds = [float(x) for x in phase_speeds_rpm]

    rep = {i: {"speed": [], "af": [], "hp": [], "peak": []} for i in range(len(crits))}
    rep_phase = {j: {"lag": [], "amp": []} for j in range(len(speeds))}
    if n_boot and (crits or speeds):
        rng = np.random.default_rng(seed)
        smooth, resid = _residual_model(t, v, smooth_revs)
        n_blocks = -(-s.size // block_revs)
        for _ in range(n_boot):
            w = np.exp(2j * np.pi * rng.random(n_blocks))
            vb = smooth + resid * np.repeat(w, block_revs)[:s.size]
            if offset_std:
                vb = vb + offset_std * complex(rng.standard_normal(), rng.standard_normal())
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                try:
                    got = find_criticals(s, vb, fit=use_fit, **kw) if crits else ()
                except AnalysisError:
                    got = ()
            for i, c in enumerate(crits):
                g = _nearest(got, c.speed_rpm, match_tolerance_pct)
                if g is None:
                    continue
                rep[i]["speed"].append(g.speed_rpm)
                rep[i]["af"].append(g.af_governing if g.af_method == c.af_method else None)
                rep[i]["hp"].append(g.half_power.af if g.half_power is not None else None)
                rep[i]["peak"].append(g.peak_amplitude)
            for j, sp in enumerate(speeds):
                lag, amp, _ = _phase_point(s, vb, afac, sp, phase_width_pct)
                rep_phase[j]["lag"].append(lag)
                rep_phase[j]["amp"].append(amp)

    out = []
    for i, c in enumerate(crits):
        r = rep[i]
        hp = c.half_power.af if c.half_power is not None else None
        out.append(CriticalEstimate(
            speed_rpm=float(c.speed_rpm), speed_std_rpm=_std(r["speed"]),
            af=c.af_governing, af_std=_std(r["af"]) if c.af_governing is not None else None,
            af_method=c.af_method, af_half_power=hp,
            af_half_power_std=_std(r["hp"]) if hp is not None else None,
            af_fit_std=c.fit.af_std if c.fit is not None else None,
            peak_amplitude=c.peak_amplitude,
            peak_amplitude_std=_std(r["peak"]) if c.peak_amplitude is not None else None,
            classification=c.classification, confidence=c.confidence,
            sweep_rate_rpm_s=c.sweep_rate_rpm_s, n_found=len(r["speed"]),
            n_af=sum(1 for x in r["af"] if x is not None), n_boot=int(n_boot) if crits else 0,
            critical=c))
    points = []
    for j, sp in enumerate(speeds):
        lag, amp, n = _phase_point(s, v, afac, sp, phase_width_pct)
        points.append(PhasePoint(sp, lag, _circ_std_deg(rep_phase[j]["lag"]) if lag is not None
                                 else None, amp, _std(rep_phase[j]["amp"]) if amp is not None
                                 else None, n))
    rate = None
    if np.ptp(t) > 0 and s.size >= 3:
        rate = float(np.polyfit(t, s, 1)[0]) if time_s is not None else None
    return CurveEstimate(direction, tuple(out), tuple(points), rate,
                         (float(s.min()), float(s.max())), int(s.size), int(n_boot), afac)


# ----------------------------------------------------------------------------- compare
def _hints(m_speed: Shift | None, m_af: Shift | None, m_peak: Shift | None) -> list[str]:
    hints = []
    if m_speed is not None and m_speed.flagged:
        if m_speed.delta < 0:
            hints.append(f"hint: the critical speed moved down {abs(m_speed.delta_pct):.1f} %: "
                         "a loss of stiffness is one possible cause (e.g. bearing clearance "
                         "growth, a softer support)")
        else:
            hints.append(f"hint: the critical speed moved up {m_speed.delta_pct:.1f} %: a "
                         "stiffer support or oil film is one possible cause (e.g. a tighter "
                         "clearance, a colder oil)")
    if m_af is not None and m_af.flagged:
        if m_af.delta > 0:
            hints.append(f"hint: the amplification factor rose from {m_af.a:.1f} to "
                         f"{m_af.b:.1f}: a loss of damping is one possible cause (e.g. worn "
                         "bearings, a changed oil film or seal)")
        else:
            hints.append(f"hint: the amplification factor fell from {m_af.a:.1f} to "
                         f"{m_af.b:.1f}: more damping, or a blunter peak from a faster sweep")
    if m_peak is not None and m_peak.flagged and m_peak.delta > 0:
        hints.append(f"hint: the peak 1X rose {m_peak.delta_pct:.0f} %: more unbalance or "
                     "less damping is a possible cause")
    return hints


def compare_curves(a: CurveEstimate, b: CurveEstimate, *,
                   match_tolerance_pct: float = 10.0, k: float = K_SIGMA,
                   sweep_rate_tolerance: float = SWEEP_RATE_TOLERANCE,
                   kind: str | None = None, amplitude_units: str = "") -> CurveComparison:
    """Match the criticals of two estimates (one probe, run ``a`` then run ``b``) and
    report each shift with its uncertainty.

    Criticals are matched by nearest speed within ``match_tolerance_pct`` of the ``a``
    critical (one-to-one, closest pairs first). For each match: the shift of the
    critical speed (rpm and %), of the governing AF (only when both runs used the same
    AF method, else the half-power AFs when both have one) and of the peak amplitude;
    phase points are compared at equal speeds. Every shift is judged by the rule of the
    module docstring (``|d| > k sigma``).

    Like with like: when the directions differ (a run-up against a coast-down) or the
    sweep rates differ by more than ``sweep_rate_tolerance`` (fraction), ``notes`` say so
    and ``like_with_like`` is False; a finite sweep shifts the apparent peak in the sweep
    direction and blunts it (F. M. Lewis, Trans. ASME 54, 1932), a bias the bootstrap
    does not see.

    Returns
    -------
    CurveComparison

    Examples
    --------
    >>> import numpy as np
    >>> n = np.linspace(300, 6000, 3000)
    >>> def run(fn, z, seed):
    ...     rng = np.random.default_rng(seed)
    ...     r = n / fn
    ...     e = 0.05 * (rng.standard_normal(n.size) + 1j * rng.standard_normal(n.size))
    ...     return estimate_curve(n, 5 * r**2 / (1 - r**2 + 2j * z * r) + e, n_boot=20, seed=seed)
    >>> cmp = compare_curves(run(3000, 0.08, 1), run(2910, 0.055, 2))
    >>> m, = cmp.matches
    >>> round(m.speed.delta_pct), m.speed.significant, m.af.significant, cmp.verdict
    (-3, True, True, 'changed')
    """
    if not match_tolerance_pct > 0:
        raise AnalysisError(invalid_value("match_tolerance_pct", match_tolerance_pct,
                                          "a positive percentage"))
    if not sweep_rate_tolerance > 0:
        raise AnalysisError(invalid_value("sweep_rate_tolerance", sweep_rate_tolerance,
                                          "a positive fraction"))
    notes: list[str] = []
    like = True
    if a.direction != b.direction:
        like = False
        notes.append(f"compares a {a.direction} with a {b.direction}: the sweep moves the "
                     "apparent peak in the sweep direction (up on a run-up, down on a "
                     "coast-down; F. M. Lewis 1932), so part of a speed shift may come from "
                     "the direction alone")
    ra, rb = a.sweep_rate_rpm_s, b.sweep_rate_rpm_s
    if ra and rb and abs(abs(rb) - abs(ra)) > sweep_rate_tolerance * abs(ra):
        like = False
        notes.append(f"sweep rates differ ({abs(ra):.0f} vs {abs(rb):.0f} rpm/s): the faster "
                     "sweep shifts the apparent peak further and lowers the AF, a bias the "
                     "uncertainty does not include")
    # one-to-one matching, closest pairs first
    cand = []
    for i, ca in enumerate(a.criticals):
        for j, cb in enumerate(b.criticals):
            d = abs(cb.speed_rpm - ca.speed_rpm) / ca.speed_rpm * 100.0
            if d <= match_tolerance_pct:
                cand.append((d, i, j))
    used_a, used_b, pairs = set(), set(), []
    for d, i, j in sorted(cand):
        if i in used_a or j in used_b:
            continue
        used_a.add(i)
        used_b.add(j)
        pairs.append((a.criticals[i], b.criticals[j]))
    pairs += [(c, None) for i, c in enumerate(a.criticals) if i not in used_a]
    pairs += [(None, c) for j, c in enumerate(b.criticals) if j not in used_b]
    pairs.sort(key=lambda p: (p[0] or p[1]).speed_rpm)

    matches = []
    all_hints: list[str] = []
    any_sig = False
    for ca, cb in pairs:
        if ca is None or cb is None:
            c = ca or cb
            side = "the earlier run" if cb is None else "the later run"
            if c.reproducible:
                note = (f"critical at {c.speed_rpm:.0f} rpm found in {side} only: a new or "
                        "lost critical, or one at the edge of a run's speed range")
            else:
                note = (f"critical at {c.speed_rpm:.0f} rpm found in {side} only, but found "
                        f"again in only {c.n_found} of {c.n_boot} bootstrap replicates: most "
                        "likely a noise bump, not counted as a change")
            matches.append(CriticalMatch(ca, cb, None, None, None, c.reproducible, (),
                                         (note,)))
            any_sig |= c.reproducible
            continue
        m_notes = []
        sp = shift("critical speed", ca.speed_rpm, cb.speed_rpm, ca.speed_std_rpm,
                   cb.speed_std_rpm, units="rpm", k=k, floor=speed_floor(ca.speed_rpm))
        if ca.af_method == cb.af_method:
            af = shift(f"AF ({ca.af_method})", ca.af, cb.af, ca.af_std, cb.af_std, k=k,
                       floor=af_floor(ca.af))
        elif ca.af_half_power is not None and cb.af_half_power is not None:
            af = shift("AF (half-power)", ca.af_half_power, cb.af_half_power,
                       ca.af_half_power_std, cb.af_half_power_std, k=k,
                       floor=af_floor(ca.af_half_power))
        else:
            af = shift(f"AF ({ca.af_method} vs {cb.af_method})", ca.af, cb.af, None, None, k=k)
            m_notes.append(f"the AFs come from different methods ({ca.af_method}, "
                           f"{cb.af_method}): their change is not judged")
        pk = shift("peak amplitude", ca.peak_amplitude, cb.peak_amplitude,
                   ca.peak_amplitude_std, cb.peak_amplitude_std, k=k, units=amplitude_units,
                   floor=amplitude_floor(kind, ca.speed_rpm))
        for c, which in ((ca, "earlier"), (cb, "later")):
            if not c.stable:
                m_notes.append(f"the {which} run's critical was found again in only "
                               f"{c.n_found} of {c.n_boot} bootstrap replicates: its "
                               "uncertainty is doubtful")
        changed = any(x is not None and x.flagged for x in (sp, af, pk))
        any_sig |= changed
        h = _hints(sp, af, pk)
        all_hints += h
        matches.append(CriticalMatch(ca, cb, sp, af, pk, changed, tuple(h), tuple(m_notes)))

    phase = []
    pb = {round(p.speed_rpm, 6): p for p in b.phase_points}
    for p in a.phase_points:
        q = pb.get(round(p.speed_rpm, 6))
        if q is None:
            continue
        ph = shift(f"lag at {p.speed_rpm:.0f} rpm", p.lag_deg, q.lag_deg, p.lag_std_deg,
                   q.lag_std_deg, units="deg", k=k, circular=True, floor=phase_floor())
        am = shift(f"1X at {p.speed_rpm:.0f} rpm", p.amplitude, q.amplitude, p.amplitude_std,
                   q.amplitude_std, k=k, units=amplitude_units,
                   floor=amplitude_floor(kind, p.speed_rpm))
        phase += [ph, am]
        any_sig |= ph.flagged or am.flagged
    return CurveComparison(tuple(matches), tuple(phase), like, tuple(notes), tuple(all_hints),
                           "changed" if any_sig else "no significant change")
