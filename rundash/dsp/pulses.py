"""Once-per-rev pulse repair: the edge times of a tach channel (from
:mod:`rundash.dsp.tach`) become one event per revolution, with missing pulses filled,
extra ones removed and a train no turning shaft makes refused.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np

from rundash.errors import TachError, TachQualityWarning, invalid_value

__all__ = ["once_per_rev", "OncePerRev", "MIN_REVOLUTIONS"]

#: Fewest once-per-rev events that make a usable reference (4 revolutions).
MIN_REVOLUTIONS = 4


@dataclass(frozen=True)
class OncePerRev:
    """The once-per-rev reference after pulse repair.

    Attributes
    ----------
    times_s : ndarray, shape (n_revs + 1,)
        Once-per-rev reference event times in s (see :mod:`rundash.conventions`).
    pulses_per_rev : int
        Pulses per revolution of the tach channel.
    n_missing_filled : int
        Pulses inserted where the tach missed some.
    n_extra_removed : int
        Spurious pulses removed.
    repair_times_s : ndarray
        Times in s of the inserted and removed pulses.
    notes : tuple of str
        What was done, in words.
    """

    times_s: np.ndarray
    pulses_per_rev: int
    n_missing_filled: int
    n_extra_removed: int
    repair_times_s: np.ndarray
    notes: tuple[str, ...]

    @property
    def n_revs(self) -> int:
        """Whole revolutions between the first and the last event."""
        return int(self.times_s.size - 1)


def _predict(d1: float, d2: float) -> float:
    """Next pulse interval from the last two (d2 the most recent).

    Uses a constant angular acceleration: the squared pulse rate is linear in angle, so
    1/d^2 is extrapolated linearly (exact for a constant run-up or coast-down rate, and
    good from the first revolutions of a hard start, unlike a median).
    """
    q = 2.0 / (d2 * d2) - 1.0 / (d1 * d1)
    if q <= 0.25 / (d2 * d2):
        return 2.0 * d2
    return 1.0 / math.sqrt(q)


#: Fewest pulse intervals agreeing with the one before (within 25 %) for a plausible
#: pulse train; a shaft's tach has nearly all, noise about a third (common practice, no
#: source; measured on white and low-passed noise: 34 % and 43 %).
MIN_REGULAR_FRACTION = 0.6

_MAX_FILL = 8  # most pulses inserted in one gap; a longer gap is a dropout, left as is


def _repair_forward(t: np.ndarray, a: int, filled: list, removed: list, notes: list,
                    sign: float = 1.0) -> list:
    """Walk forward from 3 trusted intervals ending at t[a + 3].

    Each next event is judged against the predicted pulse times under three hypotheses:
    it is the next pulse, k - 1 pulses are missing before it (it fits the k-th
    predicted pulse), or it is spurious (without it, the event after it fits a
    predicted pulse); an event that fits a pulse within 5 % is kept, another is removed
    when dropping it fits at least twice as well. When none fits, the walk starts again from the next
    four consistent intervals and the events in between are kept as they are.
    ``sign`` = -1 marks a backward walk on negated, reversed times (for the notes).
    """
    out = [float(v) for v in t[a:a + 4]]
    i = a + 4
    n = t.size
    while i < n:
        d_pred = _predict(out[-2] - out[-3], out[-1] - out[-2])
        r = (t[i] - out[-1]) / d_pred
        dev_next = abs(r - 1.0)
        if dev_next < 0.1:
            out.append(float(t[i]))
            i += 1
            continue
        # cumulative predicted times of the next 1 .. _MAX_FILL + 1 pulses
        steps = []
        da, db = out[-2] - out[-3], out[-1] - out[-2]
        for _ in range(_MAX_FILL + 1):
            dn = _predict(da, db)
            steps.append(dn)
            da, db = db, dn
        cum = np.cumsum(steps)
        dev_spurious = np.inf
        if i + 1 < n:  # without t[i], the event after it is the next or a later pulse
            dev_spurious = float(np.min(np.abs((t[i + 1] - out[-1]) / cum - 1.0)))
        gap = t[i] - out[-1]
        k = int(np.argmin(np.abs(gap / cum - 1.0))) + 1  # t[i] is the k-th next pulse
        dev_missing = abs(gap / cum[k - 1] - 1.0) if k >= 2 else np.inf
        keep = min(dev_next, dev_missing)
        # an event that fits as a pulse (within 5 %) is kept; otherwise it is dropped
        # when dropping it fits clearly better
        if keep > 0.05 and dev_spurious < 0.5 * keep and (dev_spurious < 0.2 or r < 0.5):
            removed.append(float(t[i]))
            i += 1
            continue
        if dev_missing <= dev_next and dev_missing < 0.2:
            # k - 1 pulses missing: place them by the same model, scaled to fit.
            new = [out[-1] + float(c) * gap / float(cum[k - 1]) for c in cum[:k - 1]]
            filled.extend(new)
            out.extend(new)
            out.append(float(t[i]))
            i += 1
            continue
        if dev_next < 0.33:
            out.append(float(t[i]))  # a real, if abrupt, change of speed
            i += 1
            continue
        # nothing fits (a dropout or a burst of noise): restart from a fresh anchor
        try:
            a2 = i + _find_anchor(t[i:])
        except TachError:
            out.extend(float(v) for v in t[i:])
            notes.append(f"tach irregular from t = {sign * t[i]:.4f} s to the "
                         f"{'end' if sign > 0 else 'start'}, kept unrepaired")
            break
        lo, hi = sorted((sign * t[i], sign * t[a2]))
        notes.append(f"tach irregular between t = {lo:.4f} s and {hi:.4f} s, kept unrepaired")
        out.extend(float(v) for v in t[i:a2 + 4])
        i = a2 + 4
    return out


# Tolerance of the anchor search: four consecutive intervals, each within 15 % of the
# one predicted from the two before it, are trusted as a starting point of the repair
# (common practice, no source).
_ANCHOR_TOL = 0.15


def _find_anchor(t: np.ndarray) -> int:
    """First index a where intervals a..a+3 agree with the prediction from the two
    before each (within _ANCHOR_TOL)."""
    d = np.diff(t)
    for a in range(d.size - 3):
        if (abs(d[a + 2] / _predict(d[a], d[a + 1]) - 1.0) < _ANCHOR_TOL
                and abs(d[a + 3] / _predict(d[a + 1], d[a + 2]) - 1.0) < _ANCHOR_TOL):
            return a
    raise TachError(
        "Tach pulses too irregular: no four consecutive intervals agree; "
        "check the edge, threshold and pulses_per_rev of the tach channel")


def once_per_rev(event_times_s, pulses_per_rev: int = 1, *, repair: bool = True) -> OncePerRev:
    """Once-per-rev reference events from detected tach events, with pulse repair.

    Parameters
    ----------
    event_times_s : array_like, shape (n_events,)
        Tach event times in s, increasing (e.g. from :func:`detect_edges`).
    pulses_per_rev : int
        Evenly spaced pulses per revolution (N >= 1). Every N-th event, starting with the
        first, is kept as the once-per-rev event; a missing-tooth marker is not decoded.
    repair : bool
        Detect and repair missing and extra pulses. Each interval is compared with the
        one predicted from the two before it, assuming locally constant angular
        acceleration (the squared pulse rate is extrapolated linearly in angle), so the
        repair keeps working under hard acceleration at low speed. An interval close to
        k times the prediction (k >= 2) gets k - 1 pulses inserted; a pulse that comes
        too early and whose removal makes the next one fit is removed. The walk starts
        from the first three consistent intervals and goes backwards from there too.

    Returns
    -------
    OncePerRev

    Warns
    -----
    TachQualityWarning
        When pulses were inserted or removed, or a stretch fitted no hypothesis (it is
        then kept unrepaired and named in ``notes``). At most 8 pulses are inserted in
        one gap; a longer gap is taken as a dropout.

    Raises
    ------
    TachError
        With fewer than 4 revolutions of events, or events that are not increasing, or
        (with ``repair``) a train of at least 20 pulses of which fewer than
        :data:`MIN_REGULAR_FRACTION` of the intervals agree within 25 % with the one
        before: noise on the channel, not once-per-rev events.
    """
    t = np.asarray(event_times_s, dtype=np.float64).ravel()
    if isinstance(pulses_per_rev, bool) or int(pulses_per_rev) != pulses_per_rev or pulses_per_rev < 1:
        raise TachError(invalid_value("pulses_per_rev", pulses_per_rev, "an integer >= 1"))
    ppr = int(pulses_per_rev)
    need = MIN_REVOLUTIONS * ppr + 1
    if t.size < need:
        raise TachError(
            f"Too few tach pulses: {t.size} events with pulses_per_rev={ppr} make fewer "
            f"than {MIN_REVOLUTIONS} revolutions (need at least {need} events); check the "
            "tach channel, its threshold and the edge")
    if not np.all(np.isfinite(t)) or np.any(np.diff(t) <= 0):
        raise TachError(invalid_value("event_times_s", "non-increasing or non-finite times",
                                      "strictly increasing finite times in s"))
    notes: list[str] = []
    filled: list[float] = []
    removed: list[float] = []
    if repair:
        a = _find_anchor(t)
        fwd = _repair_forward(t, a, filled, removed, notes)  # from a trusted anchor on
        if a > 0:
            back = _repair_forward(-t[: a + 4][::-1], 0,  # and back to the start
                                   filled_b := [], removed_b := [], notes_b := [], -1.0)
            notes.extend(notes_b)
            filled.extend(-v for v in filled_b)
            removed.extend(-v for v in removed_b)
            pulses = np.concatenate([-np.asarray(back[::-1])[:-4], np.asarray(fwd)])
        else:
            pulses = np.asarray(fwd)
        if filled:
            notes.append(f"{len(filled)} missing tach pulse(s) inserted")
        if removed:
            notes.append(f"{len(removed)} spurious tach pulse(s) removed")
        _check_plausible(pulses)
    else:
        pulses = t
    times = pulses[::ppr].copy()
    if times.size < MIN_REVOLUTIONS + 1:
        raise TachError(
            f"Too few tach pulses after repair: {times.size} once-per-rev events make fewer "
            f"than {MIN_REVOLUTIONS} revolutions")
    rep = np.sort(np.asarray(filled + removed, dtype=np.float64))
    if rep.size or notes:
        where = f" (first repair at t = {rep[0]:.4f} s)" if rep.size else ""
        warnings.warn("; ".join(notes) + where, TachQualityWarning, stacklevel=2)
    return OncePerRev(times_s=times, pulses_per_rev=ppr, n_missing_filled=len(filled),
                      n_extra_removed=len(removed), repair_times_s=rep, notes=tuple(notes))


def _check_plausible(pulses: np.ndarray) -> None:
    """Refuse a pulse train that no turning shaft makes (noise on the tach channel)."""
    d = np.diff(pulses)
    if d.size < 20:
        return
    r = d[1:] / d[:-1]
    regular = float(np.mean((r >= 0.8) & (r <= 1.25)))
    if regular < MIN_REGULAR_FRACTION:
        raise TachError(
            f"The tach shows no plausible once-per-rev events: only {100 * regular:.0f} % of "
            f"{d.size} pulse intervals agree within 25 % with the one before (a turning "
            f"shaft gives nearly all); check that the tach column carries the "
            f"once-per-rev reference, and its edge and threshold")
