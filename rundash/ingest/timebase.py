"""Time columns: the sample rate from a column of time stamps, checked block by block.

A reader that finds a time column (CSV, Parquet, HDF5, the masters of MDF4 channel groups)
hands its values, block by block and in order, to a :class:`TimeBase`. It decides the
column's unit, estimates the sample rate and refuses a column that is not evenly sampled,
naming the row.

Method
------
1. **Unit.** From the column name (``time_ms``, ``Time [µs]``, ``t (s)``, ``time in ms``),
   else, with a declared rate, the unit that agrees with it, else from the step size:
   seconds when that gives at least :data:`MIN_RATE_HZ` samples per second, else
   milliseconds, else microseconds. The import summary says which and why.
2. **Printed resolution** ``q`` of each block: the finest decimal place that its last
   (largest) :data:`RESOLUTION_ROWS` values use. Fixed-point printing keeps it constant;
   ``%g`` printing coarsens it as the time stamps grow, and the block's largest values
   show the coarsest. Values stored as binary floats carry all their digits, so ``q``
   falls to the float resolution.
3. **Steps.** Time stamps of an even grid printed to ``q`` step by ``q floor(h/q)`` or
   ``q ceil(h/q)`` (``h``, the sample interval, when ``q`` is fine); every step must lie
   in that range widened by ``2 eps + SLACK h`` (eps: float64 resolution at the value;
   SLACK: :data:`SLACK`, for clock jitter): a gap, a repeated or a backward time stamp
   names its row (as far as the printed resolution can show it).
4. **Line.** A least-squares line ``t_i = a + b i`` over every row so far, updated block by
   block with the pairwise update of Chan, Golub & LeVeque; every residual lies within
   ``q/2 + eps + SLACK h``: a drifting clock names the first row off the line.
5. **Rate.** ``1 / b`` (in Hz), rounded to the shortest decimal number that stays within
   three standard errors of the fit and keeps the first block's residuals within
   tolerance (a recorder's rate is a round number; files of one run then agree exactly).
   Should a later block leave that rounded rate's grid but fit the refined line, the
   refined fit is used from then on. A declared rate (``[data].sample_rate_hz``, a
   format's own rate attribute) replaces the fit: the column is then only checked
   against it, and refused when the two differ by more than 0.1 %.
6. **Epoch.** A first time stamp of at least :data:`EPOCH_MIN_S` seconds (March 1973) is
   taken as Unix epoch time (UTC); the run's start time is the fitted time of sample 0.

References
----------
T. F. Chan, G. H. Golub, R. J. LeVeque, "Algorithms for computing the sample variance:
analysis and recommendations", The American Statistician 37(3), 242-247, 1983.
"""

from __future__ import annotations

import math
import re
from datetime import datetime, timezone

import numpy as np

from rundash.errors import InputError

#: Factor from each time unit to seconds.
UNIT_FACTORS = {"s": 1.0, "ms": 1e-3, "us": 1e-6, "ns": 1e-9}
UNIT_SHOWN = {"s": "s", "ms": "ms", "us": "µs", "ns": "ns"}
#: Lowest sample rate taken as plausible when the unit is judged by the step size: a
#: vibration record needs well over 2 x the 1X frequency (50 Hz covers 1X up to 1500 rpm;
#: common practice, no source; the threshold is our choice).
MIN_RATE_HZ = 50.0
#: First time stamps at or above this many seconds are Unix epoch time (1973-03-03).
EPOCH_MIN_S = 1e8
#: Epoch time stamps at or after this date are refused (a wrong unit, not a date).
EPOCH_MAX = datetime(2200, 1, 1, tzinfo=timezone.utc)
#: Time stamps this large (in any unit) are no clock's (epoch time in ns is ~1.8e18).
MAX_ABS_TIME = 1e19
#: Timing slack allowed beyond the printed resolution, as a fraction of the sample interval.
SLACK = 0.05
#: Rows of the first block that set the unit and the first fit.
FIT_ROWS = 1 << 16
#: The last rows of each block whose printed digits give the block's resolution.
RESOLUTION_ROWS = 256

_EPS = np.finfo(np.float64).eps
_UNIT_WORDS = {
    "s": "s", "sec": "s", "secs": "s", "second": "s", "seconds": "s",
    "ms": "ms", "msec": "ms", "msecs": "ms", "millisecond": "ms", "milliseconds": "ms",
    "us": "us", "µs": "us", "μs": "us", "usec": "us", "usecs": "us", "microsecond": "us",
    "microseconds": "us", "ns": "ns", "nsec": "ns", "nanosecond": "ns", "nanoseconds": "ns",
}
_TIME_WORDS = {"time", "t", "timestamp", "time_stamp", "zeit", "times"}


def parse_time_name(name: str) -> tuple[bool, str | None]:
    """``(looks like a time column, unit named in it or None)``.

    >>> parse_time_name("Time [ms]"), parse_time_name("time_s"), parse_time_name("x1")
    ((True, 'ms'), (True, 's'), (False, None))
    """
    n = name.strip().lower()
    m = re.fullmatch(r"(?P<w>.*?)[\s_]*[\[\(]\s*(?P<u>[a-zµμ]+)\s*[\]\)]", n) or \
        re.fullmatch(r"(?P<w>[a-z_]+?)[\s_]+(?:in[\s_]+)?(?P<u>[a-zµμ]+)", n)
    if m and m["u"] in _UNIT_WORDS:
        return m["w"].strip(" _") in _TIME_WORDS, _UNIT_WORDS[m["u"]]
    return n in _TIME_WORDS, None


def _decimals(v: np.ndarray) -> np.ndarray:
    """Per value, the fewest decimal places that print it (16: more than float64 holds)."""
    d = np.full(v.shape, 16, dtype=np.int64)
    left = np.ones(v.shape, dtype=bool)
    for k in range(16):
        x = v * 10.0 ** k
        ok = left & (np.abs(x - np.rint(x)) <= 8 * _EPS * np.abs(x) + 1e-300)
        d[ok] = k
        left &= ~ok
        if not left.any():
            break
    return d


class TimeBase:
    """The time base of one record from its time column (see the module doc).

    Parameters
    ----------
    source : str
        File name, for messages.
    column : str
        Name of the time column (its unit may be in the name).
    declared_hz : float or None
        A rate that governs (the column is then only checked against it).
    declared_where : str
        Where the declared rate comes from, for messages.
    first_row : int
        Row number of sample 0 in messages (2 for a CSV with one header row).
    unit : str or None
        The column's unit when the file states it (an attribute, an Arrow type); it
        replaces the unit read from the name.
    """

    def __init__(self, source: str, column: str, *, declared_hz: float | None = None,
                 declared_where: str = "[data].sample_rate_hz", first_row: int = 0,
                 what: str = "time column", unit: str | None = None,
                 unit_from: str = "its unit attribute"):
        self.source = source
        self.column = column
        self.what = what
        _, self.unit = parse_time_name(column)
        self.unit_from = "its name" if self.unit else ""
        if unit is not None:
            u = _UNIT_WORDS.get(unit.strip().lower())
            if u is None:
                raise InputError(f"{source}: {what} {column!r} has the unit {unit!r}; expected "
                                 "s, ms, µs or ns")
            self.unit, self.unit_from = u, unit_from
        self.declared_hz = declared_hz
        self.declared_where = declared_where
        self.first_row = first_row
        self.n = 0
        self.mode = ""  # 'declared', 'rounded' or 'fit'
        self.start_time: datetime | None = None
        self.warnings: list[str] = []
        self._fs = float("nan")
        self.initial_rate_hz = float("nan")
        # running least-squares statistics of y = t - ref against the sample index
        self._mi = self._mt = self._cii = self._cit = self._ctt = 0.0

    # ------------------------------------------------------------------ public
    @property
    def rate_hz(self) -> float:
        return self._fs

    @property
    def t0_s(self) -> float:
        """Fitted time of sample 0 in seconds (on the column's own clock)."""
        return (self._ref + self._intercept()) * UNIT_FACTORS[self.unit]

    def feed(self, t: np.ndarray) -> None:
        """Check the next block of time stamps (file units, in order) and refine the fit."""
        t = np.asarray(t, dtype=np.float64)
        if t.size == 0:
            return
        bad = np.flatnonzero(~np.isfinite(t))
        if bad.size:
            i = int(bad[0])
            raise self._fail(self.n + i, f"value {t[i]!r} is not a finite number (empty or "
                             "not numeric)")
        if self.n == 0:
            self._first(t)
        else:
            self._more(t)

    def note(self) -> str:
        """One line for the import summary: unit, rate and how it was found."""
        u = UNIT_SHOWN[self.unit]
        head = f"{self.what} {self.column!r} in {u} (by {self.unit_from})"
        if self.mode == "declared":
            how = (f"{self._fs:.10g} Hz from {self.declared_where}; the {self.what} checked "
                   f"against it over {self.n} rows")
        elif self.mode == "rounded":
            how = f"{self._fs:.10g} Hz from a least-squares fit of {self.n} time stamps"
        else:
            how = (f"{self._fs:.10g} Hz from a least-squares fit of {self.n} time stamps "
                   "(refined as the file was read)")
        res = f", resolved to {self._q0:.3g} {u}" if self._q0 > 0 else ""
        epoch = ""
        if self.start_time is not None:
            epoch = f"; epoch time stamps: the run starts {self.start_time.isoformat()}"
        return f"{head}{res}: {how}{epoch}"

    # ------------------------------------------------------------------ internals
    def _fail(self, index: int, msg: str) -> InputError:
        return InputError(f"{self.source}: {self.what} {self.column!r}, row "
                          f"{self.first_row + index}: {msg}")

    @staticmethod
    def _q(t: np.ndarray) -> float:
        """Printed resolution of a block (file units): the finest decimal place its last
        (largest) values use; 0 when they carry all the digits a float holds."""
        d = int(_decimals(t[-RESOLUTION_ROWS:]).max())
        return 10.0 ** -d if d < 16 else 0.0

    def _tols(self, t: np.ndarray) -> tuple[float, float, float]:
        """``(lowest step, highest step, largest residual)`` allowed in a block.

        Printed to a resolution q, time stamps of an even grid step by q*floor(h/q) or
        q*ceil(h/q) (h exactly when q is fine), and sit within q/2 of the grid line."""
        maxabs = float(max(abs(t[0]), abs(t[-1])))
        q = self._q(t)
        fe = 4 * _EPS * maxabs
        slack = SLACK * self._h
        if q > 0:
            r = self._h / q
            lo, hi = (round(r),) * 2 if abs(r - round(r)) < 1e-6 else (
                math.floor(r), math.ceil(r))
            lo, hi = lo * q, hi * q
        else:
            lo = hi = self._h
        return lo - 2 * fe - slack, hi + 2 * fe + slack, 0.5 * q + fe + slack

    def _first(self, t: np.ndarray) -> None:
        if t.size < 2:
            raise InputError(f"{self.source}: {self.what} {self.column!r} has fewer than two "
                             "rows")
        big = np.flatnonzero(np.abs(t) >= MAX_ABS_TIME)
        if big.size:
            i = int(big[0])
            raise self._fail(i, f"time {t[i]!r} is beyond any clock (expected seconds from the "
                             "start, or Unix epoch time in s, ms, µs or ns)")
        self._ref = float(t[0])
        y = t - self._ref
        self._q0 = self._q(t)
        # robust step: the median of K-steps, K grown until K steps clear the resolution
        k = 1
        while True:
            h = float(np.median((y[k:] - y[:-k]) / k))
            if h * k > 20 * self._q0 or 8 * k >= t.size:
                break
            k *= 8
        if not h > 0:
            steps = np.diff(t)
            i = int(np.flatnonzero(steps <= 0)[0]) + 1 if (steps <= 0).any() else 1
            raise self._fail(i, f"time {t[i]!r} does not increase from {t[i - 1]!r} (expected "
                             "evenly spaced, increasing time)")
        self._h = h
        self._pick_unit(h)
        self._steps(y, None, 0)
        self._add(y, 0)
        b = self._cit / self._cii
        fs_fit = 1.0 / (b * UNIT_FACTORS[self.unit])
        if self.declared_hz is not None:
            if abs(fs_fit - self.declared_hz) > 1e-3 * self.declared_hz:
                raise InputError(
                    f"{self.source}: sample rate {fs_fit:.6g} Hz from the {self.what} "
                    f"{self.column!r} disagrees with {self.declared_where} = "
                    f"{self.declared_hz:.6g} Hz; expected one sample rate: correct the machine "
                    "description or drop its sample_rate_hz")
            self._fs, self.mode = float(self.declared_hz), "declared"
        else:
            self._fs, self.mode = self._rounded(fs_fit, b, y), "rounded"
            if math.isnan(self._fs):
                self._fs, self.mode = fs_fit, "fit"
        self._residuals(y, 0)
        self.initial_rate_hz = self._fs
        self.n = t.size
        self._last = float(y[-1])
        t0_s = (self._ref + self._intercept()) * UNIT_FACTORS[self.unit]
        if t0_s >= EPOCH_MIN_S:
            try:
                self.start_time = datetime.fromtimestamp(t0_s, tz=timezone.utc)
            except (OverflowError, OSError, ValueError):
                self.start_time = None
            if self.start_time is None or self.start_time >= EPOCH_MAX:
                raise self._fail(0, f"time {t[0]!r} {UNIT_SHOWN[self.unit]} (by "
                                 f"{self.unit_from}) as Unix epoch time is after "
                                 f"{EPOCH_MAX.year}; expected seconds from the start or epoch "
                                 "time (name the unit in the column name, e.g. 'time_ns')")
        q_end = self._q0
        if q_end > h:
            self.warnings.append(
                f"{self.what} {self.column!r} is printed to {q_end:.3g} "
                f"{UNIT_SHOWN[self.unit]}, coarser than its sample interval "
                f"{h:.3g} {UNIT_SHOWN[self.unit]}: gaps shorter than that cannot be seen")

    def _pick_unit(self, h: float) -> None:
        if self.unit is not None:  # a rate out of range is refused by the importer
            return
        if self.declared_hz is not None:
            self.unit = min(UNIT_FACTORS, key=lambda u: abs(math.log(
                self.declared_hz * h * UNIT_FACTORS[u])))
            self.unit_from = f"agreement with {self.declared_where}"
            return
        for u, f in UNIT_FACTORS.items():
            if 1.0 / (h * f) >= MIN_RATE_HZ:
                self.unit, self.unit_from = u, "its step size"
                return
        raise InputError(
            f"{self.source}: {self.what} {self.column!r} steps by {h:.6g}: fewer than "
            f"{MIN_RATE_HZ:g} samples per second whether in s, ms, µs or ns; expected time in s, "
            "ms or µs (name the unit in the column name, e.g. 'time_ms', or set "
            "[data].sample_rate_hz)")

    def _steps(self, y: np.ndarray, prev: float | None, start: int) -> None:
        lo, hi, _ = self._tols(y + self._ref)
        yy = y if prev is None else np.concatenate(([prev], y))
        d = np.diff(yy)
        bad = np.flatnonzero((d < lo) | (d > hi))
        if bad.size:
            j = int(bad[0])
            i = start + j + (1 if prev is None else 0)  # index of the later sample
            later, earlier = yy[j + 1] + self._ref, yy[j] + self._ref
            u = UNIT_SHOWN[self.unit] if self.unit else ""
            raise self._fail(i, f"time {float(later)!r} {u} does not follow {float(earlier)!r} "
                             f"{u} by the sample interval {self._h:.6g} {u} (expected evenly "
                             "spaced, increasing time)")

    def _add(self, y: np.ndarray, start: int) -> None:
        """Pairwise update of the least-squares statistics with one block."""
        m = y.size
        i = np.arange(start, start + m, dtype=np.float64)
        mi_b = start + (m - 1) / 2.0
        mt_b = float(y.mean())
        dy = y - mt_b
        cii_b = m * (m * m - 1) / 12.0
        # einsum, not np.dot: a BLAS call here costs ~100 x more on a busy machine
        # (OpenBLAS threads wait for cores)
        cit_b = float(np.einsum("i,i->", i - mi_b, dy))
        ctt_b = float(np.einsum("i,i->", dy, dy))
        n = self.n
        tot = n + m
        di, dt = mi_b - self._mi, mt_b - self._mt
        self._mi += di * m / tot
        self._mt += dt * m / tot
        w = n * m / tot
        self._cii += cii_b + di * di * w
        self._cit += cit_b + di * dt * w
        self._ctt += ctt_b + dt * dt * w

    def _slope(self) -> float:
        if self.mode in ("declared", "rounded"):
            return 1.0 / (self._fs * UNIT_FACTORS[self.unit])
        return self._cit / self._cii

    def _intercept(self) -> float:
        return self._mt - self._slope() * self._mi

    def _bad_residual(self, y: np.ndarray, start: int) -> int | None:
        res_tol = self._tols(y + self._ref)[2]
        b, a = self._slope(), self._intercept()
        r = y - (a + b * np.arange(start, start + y.size, dtype=np.float64))
        bad = np.flatnonzero(np.abs(r) > res_tol)
        return None if bad.size == 0 else int(bad[0])

    def _residuals(self, y: np.ndarray, start: int) -> None:
        j = self._bad_residual(y, start)
        if j is not None:
            self._off_grid(y, start, j)

    def _off_grid(self, y: np.ndarray, start: int, j: int) -> None:
        res_tol = self._tols(y + self._ref)[2]
        b, a = self._slope(), self._intercept()
        expect = self._ref + a + b * (start + j)
        u = UNIT_SHOWN[self.unit]
        rate = (f"{self._fs:.10g} Hz of {self.declared_where}" if self.mode == "declared"
                else f"{1.0 / (b * UNIT_FACTORS[self.unit]):.10g} Hz")
        raise self._fail(start + j, f"time {float(y[j] + self._ref)!r} {u} is off the "
                         f"sampling grid (expected {expect:.10g} {u} at {rate}, within "
                         f"{res_tol:.2g} {u}: evenly spaced, increasing time)")

    def _rounded(self, fs_fit: float, b: float, y: np.ndarray) -> float:
        """The shortest decimal rate within 3 standard errors whose grid fits ``y``."""
        n = y.size
        resvar = max(self._ctt - self._cit * self._cit / self._cii, 0.0) / max(n - 2, 1)
        sd_rel = max(math.sqrt(resvar / self._cii) / b, 1e-12)
        for digits in range(1, 13):
            c = float(f"{fs_fit:.{digits}g}")
            if abs(c - fs_fit) <= 3 * sd_rel * fs_fit:
                keep = self._fs, self.mode
                self._fs, self.mode = c, "rounded"
                ok = self._bad_residual(y, 0) is None
                self._fs, self.mode = keep
                if ok:
                    return c
        return float("nan")

    def _more(self, t: np.ndarray) -> None:
        """A later block: checked against the line so far (extrapolated: its error over a
        block is far below the slack), then added to the fit."""
        y = t - self._ref
        start = self.n
        if self.mode == "fit":
            self._h = self._slope()
        self._steps(y, self._last, start)
        j = self._bad_residual(y, start)
        if j is not None and self.mode == "rounded":
            # the rounded rate may be a hair off a true rate that is not round: refit
            saved = (self._mi, self._mt, self._cii, self._cit, self._ctt, self._fs)
            self._add(y, start)
            self.mode = "fit"
            if self._bad_residual(y, start) is None:
                self._fs = 1.0 / (self._slope() * UNIT_FACTORS[self.unit])
                self.n += t.size
                self._last = float(y[-1])
                return
            self._mi, self._mt, self._cii, self._cit, self._ctt, self._fs = saved
            self.mode = "rounded"
        if j is not None:
            self._off_grid(y, start, j)
        self._add(y, start)
        if self.mode == "fit":
            self._fs = 1.0 / (self._slope() * UNIT_FACTORS[self.unit])
        self.n += t.size
        self._last = float(y[-1])
