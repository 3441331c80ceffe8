"""What a finite sweep rate does to the reading of a critical (F. M. Lewis, Trans. ASME 54,
1932): the quasi-steady rule, which way the apparent peak moves, and the post-resonance
beating a fast sweep leaves behind. Pure numpy; used by
:func:`rundash.analysis.criticals.find_criticals`.
"""

from __future__ import annotations

import math
from dataclasses import replace
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from rundash.analysis.criticals import Critical

#: Default quasi-steady rule: the half-power band must take at least this many modal
#: decay times ``1/(zeta*omega_n)`` to cross (our own choice; see find_criticals).
QUASI_STEADY_RATIO = 20.0


def sweep_reading(speed, time_s, band, zeta, nc, ratio_min):
    if time_s is None:
        return None, None, ""
    m = (speed >= band[0]) & (speed <= band[1])
    if np.count_nonzero(m) < 3 or np.ptp(time_s[m]) <= 0:
        return None, None, "too few samples in the band to measure the sweep rate"
    rate = float(np.polyfit(time_s[m], speed[m], 1)[0])
    if rate == 0 or zeta is None or not zeta > 0:
        return rate, None, ""
    width = band[1] - band[0]
    t_band = width / abs(rate)
    tau = 1.0 / (zeta * 2 * math.pi * nc / 60.0)
    ratio = t_band / tau
    note = ""
    if ratio < ratio_min:
        note = (f"sweep too fast for a quasi-steady reading: the band ({width:.0f} rpm) is "
                f"crossed in {t_band:.2f} s, {ratio:.1f} modal decay times (rule: at least "
                f"{ratio_min:g}); " + shift_words(rate) + " (F. M. Lewis, Trans. ASME, 1932)")
    return rate, ratio, note


def shift_words(rate: float) -> str:
    """Which way a fast sweep moves the apparent reading (Lewis 1932): with the sweep.

    The peak moves in the sweep direction, so a run-up reads the critical high and a
    coast-down reads it low; the half-power AF is distorted either way (in SDOF sweeps
    integrated with scipy, fn 3000 rpm, zeta 0.05, the AF read 10.3 / 9.5 on run-ups at
    300 / 1000 rpm/s and 9.2 / 7.6 on coast-downs, against 9.90 steady).
    """
    if rate > 0:
        return ("on this run-up the apparent peak reads above the steady-state critical "
                "and its half-power AF is distorted (high or low)")
    return ("on this coast-down the apparent peak reads below the steady-state critical and "
            "its half-power AF is distorted (usually low)")



#: Decay times of the free vibration after a fast sweep within which a ripple of the 1X
#: on the sweep side of a critical is read as beating (our own choice: e^-5 = 0.7 %).
BEAT_DECAY_TIMES = 5.0


def drop_beating(found: list[Critical]) -> list[Critical]:
    """Remove ripples that are post-resonance beating, not criticals.

    After a sweep too fast for a quasi-steady reading, the free vibration at the
    natural frequency outlasts the passage and beats with the 1X: the amplitude ripples
    on the sweep side of the critical (above it on a run-up, below on a coast-down)
    while the free vibration decays with ``exp(-zeta omega_n t)`` (F. M. Lewis, Trans.
    ASME 54, 1932). A peak without phase confirmation, lower than a confirmed critical
    whose sweep was too fast, on its sweep side, within the speed the sweep covers in
    :data:`BEAT_DECAY_TIMES` decay times beyond its band, is such a ripple: it is
    dropped and named in the critical's evidence.
    """
    out = list(found)
    for j, main in enumerate(found):
        if (main.classification != "confirmed" or not main.sweep_note
                or not main.sweep_rate_rpm_s or main.peak_amplitude is None):
            continue
        zeta = main.fit.zeta if main.fit is not None else (
            0.5 / main.af_governing if main.af_governing else None)
        if not zeta or zeta <= 0:
            continue
        sign = math.copysign(1.0, main.sweep_rate_rpm_s)
        wn = 2.0 * math.pi * main.speed_rpm / 60.0
        reach = abs(main.sweep_rate_rpm_s) * BEAT_DECAY_TIMES / (zeta * wn)
        edge = main.band_rpm[1] if sign > 0 else main.band_rpm[0]
        ripples = [c for c in out if c is not main and c.classification == "amplitude-only"
                   and c.peak_amplitude is not None and c.peak_amplitude < main.peak_amplitude
                   and 0 < sign * (c.speed_rpm - main.speed_rpm)
                   and sign * (c.speed_rpm - edge) <= reach]
        if not ripples:
            continue
        speeds = ", ".join(f"{c.speed_rpm:.0f}" for c in sorted(ripples, key=lambda c: c.speed_rpm))
        side = "above" if sign > 0 else "below"
        sentence = (f"the amplitude ripple at {speeds} rpm {side} it is post-resonance beating "
                    f"(the free vibration at the natural frequency, decaying over "
                    f"{1.0 / (zeta * wn):.2f} s, beats with the 1X after the fast sweep; "
                    f"F. M. Lewis, 1932), not a critical")
        k = out.index(main)
        out[k] = replace(main, evidence=main.evidence + (sentence,))
        out = [c for c in out if c not in ripples]
    return out
