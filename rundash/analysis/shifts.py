"""One quantity's change between two runs, judged against its uncertainty.

Pure numpy. The primitives of a run comparison (:mod:`rundash.analysis.compare`): the
change of one number with its combined one-sigma uncertainty (:func:`shift`), and the
mean of complex vectors with its standard error and its change between runs
(:func:`vector_mean`, :func:`compare_vectors`). A change counts as *significant* only when
it is larger than its uncertainty by the rule below, and is *flagged* (counted as a change)
only when it is significant and at least its engineering floor
(:mod:`rundash.analysis.significance`, each floor with its source).

Significance rule
-----------------
A change ``d = b - a`` with one-sigma uncertainties ``sa`` and ``sb`` (independent runs)
is significant when ``|d| > k * sqrt(sa^2 + sb^2)`` with ``k = 2`` by default, about the
95 % two-sided level for Gaussian errors (common practice, no source). A quantity whose
uncertainty is unknown is never called significant.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from rundash.errors import AnalysisError, invalid_value

#: Default k of the significance rule ``|d| > k * sigma_combined``.
K_SIGMA = 2.0


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


# ----------------------------------------------------------------------------- functions
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
