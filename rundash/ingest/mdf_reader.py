"""ASAM MDF reader (MDF4, also MDF3; needs the ``mdf`` extra: asammdf).

Channels are found by name in every channel group (a name used in two groups is refused
when it is used). Values come with the file's conversion rules applied (linear,
rational, formula, table: everything asammdf evaluates to numbers; a value-to-text rule
is refused for a channel in use) and each channel's unit as the file gives it
(:attr:`Reader.units`; the importer checks it against the machine description).

Each channel group has its own time (master) channel; every group that holds a channel in
use is checked by :class:`~rundash.ingest.timebase.TimeBase` (even spacing, the rate,
naming the record). The groups must share one sample rate (rundash does not resample
between rates: that is refused with both rates named); when they start at different
times, the channels are aligned on the grid of the tach's group (or of the first channel
in use): by whole records where the offset is a whole number of samples, else by linear
interpolation between neighbouring records (the amplitude of a component at frequency f
falls by at most 1 - cos(pi f / fs): 0.05 % at 1 % of the sample rate), and the import
summary says so. The record starts at the file header's start time plus the first common
time stamp.
"""

from __future__ import annotations

import contextlib
import gc
import logging
import math
import sys
from datetime import timedelta
from typing import Iterator

import numpy as np

from rundash.errors import InputError
from rundash.ingest.base import DEFAULT_BLOCK, Reader, describe
from rundash.ingest.timebase import FIT_ROWS, TimeBase


class MdfReader(Reader):
    format = "mdf"
    title, library, extra = "ASAM MDF", "asammdf", "mdf"

    def __init__(self, path, data=None):
        super().__init__(path, data)
        MDF = self.need("asammdf").MDF
        self._logged: list[str] = []
        with self._asammdf_log():
            self._mdf, problem = _open_quietly(MDF, self.path)
        if problem:
            raise self.unreadable(problem, "; expected an MDF file whole, as the recorder "
                                  "wrote it")
        try:
            self._where: dict[str, list[tuple[int, int]]] = {}
            masters = self._mdf.masters_db
            for gi, grp in enumerate(self._mdf.groups):
                for ci, ch in enumerate(grp.channels):
                    if masters.get(gi) == ci or not ch.name:
                        continue
                    self._where.setdefault(ch.name, []).append((gi, ci))
        except Exception as exc:  # a damaged block list
            self.close()
            raise self.unreadable(exc) from None
        self.channels = tuple(self._where)
        if not self.channels:
            self.close()
            raise self.fail("no channels besides the time channels; expected one channel per "
                            "transducer")
        self._plan = None

    # ------------------------------------------------------------------ plan
    def select(self, names) -> None:
        before = self.selected
        super().select(names)
        if self.selected != before:
            self._plan = None

    @property
    def sample_rate_hz(self) -> float:
        if self._plan is None and getattr(self, "_mdf", None) is not None:
            self._make_plan()
        return self._fs

    @sample_rate_hz.setter
    def sample_rate_hz(self, value: float) -> None:
        self._fs = float(value)

    @contextlib.contextmanager
    def _asammdf_log(self):
        """asammdf logs what it finds odd (a malformed XML comment, ...) to stderr: keep
        those lines as warnings of this file instead (the command line stays one line)."""
        log = logging.getLogger("asammdf")
        keep = log.handlers[:], log.propagate
        seen = self._logged

        class Collect(logging.Handler):
            def emit(self, record):
                text = " ".join(record.getMessage().split())[:200]
                if text not in seen and len(seen) < 5:
                    seen.append(text)

        log.handlers, log.propagate = [Collect(logging.WARNING)], False
        try:
            yield
        finally:
            log.handlers, log.propagate = keep

    def _file_warnings(self) -> list[str]:
        return [f"MDF file: {m} (reported by asammdf)" for m in self._logged]

    def _read(self, what: str, fn, *args, **kw):
        try:
            with self._asammdf_log():
                return fn(*args, **kw)
        except InputError:
            raise
        except Exception as exc:  # asammdf on damaged data blocks
            raise self.fail(f"{what}: cannot read it ({describe(exc)})") from None

    def _make_plan(self) -> None:
        names = [self.channels[i] for i in self.selected]
        groups: dict[int, list[tuple[int, str, int]]] = {}
        for pos, name in enumerate(names):
            where = self._where[name]
            if len(where) > 1:
                gs = " and ".join(str(g) for g, _ in where[:3])
                raise self.fail(f"channel {name!r} is in channel groups {gs}; expected one "
                                "channel of that name (rename one in the recorder's setup)")
            gi, ci = where[0]
            groups.setdefault(gi, []).append((pos, name, ci))
        self.units = {}
        tbs: dict[int, TimeBase] = {}
        for gi, members in groups.items():
            probe = self._read(f"channel group {gi}", self._mdf.select,
                               [(name, gi, ci) for _, name, ci in members], record_count=2)
            for (_, name, _), sig in zip(members, probe):
                if sig.samples.dtype.kind not in "iufb":
                    raise self.fail(f"channel {name!r} holds {sig.samples.dtype} values (a text "
                                    "or byte channel); expected numbers")
                self.units[name] = (sig.unit or "").strip()
            n_g = self._mdf.groups[gi].channel_group.cycles_nr
            if n_g < 2:
                raise self.fail(f"channel group {gi} holds {n_g} records; expected at least two")
            master = self._mdf.groups[gi].channels[self._mdf.masters_db.get(gi, 0)].name or \
                "time"
            tb = TimeBase(self.path.name, f"{master}@{gi}", declared_hz=self.data.sample_rate_hz,
                          what="time channel", unit="s", unit_from="the MDF time channel")
            t = self._read(f"time channel of group {gi}", self._mdf.get_master, gi,
                           record_count=min(n_g, FIT_ROWS))
            tb.feed(np.asarray(t, dtype=np.float64))
            tbs[gi] = tb
        ref_name = (names[0] if names else self.channels[0])
        ref = self._where[ref_name][0][0]
        fs = tbs[ref].rate_hz
        for gi, tb in tbs.items():
            if abs(tb.rate_hz - fs) > 1e-6 * fs:
                other = next(name for _, name, _ in groups[gi])
                raise self.fail(
                    f"channel {other!r} (group {gi}) is sampled at {tb.rate_hz:.10g} Hz, "
                    f"channel {ref_name!r} (group {ref}) at {fs:.10g} Hz; expected one sample "
                    "rate for the tach and every probe (rundash does not resample between "
                    "rates: record them at one rate)")
        # offsets on the reference grid: group sample p = j + off
        t0 = {gi: tb.t0_s for gi, tb in tbs.items()}
        off = {gi: (t0[ref] - t0[gi]) * fs for gi in tbs}
        n = {gi: self._mdf.groups[gi].channel_group.cycles_nr for gi in tbs}
        j0 = max(0, max(math.ceil(-o - 1e-6) for o in off.values()))
        j1 = min(math.floor(n[gi] - 1 - off[gi] + 1e-6) + 1 for gi in tbs)
        if j1 - j0 < 2:
            raise self.fail("the channel groups in use do not overlap in time; expected "
                            "records of one run")
        frac = {gi: off[gi] - round(off[gi]) for gi in tbs}
        self._lerp = {gi: abs(f) > 1e-3 for gi, f in frac.items()}
        self._groups, self._tbs, self._off, self._span = groups, tbs, off, (j0, j1)
        self._fed = {gi: min(n[gi], FIT_ROWS) for gi in tbs}
        self._fs = fs
        self.n_samples = j1 - j0
        start = t0[ref] + j0 / fs
        self.start_time = tbs[ref].start_time
        try:
            head = self._mdf.header.start_time
        except Exception:  # pragma: no cover - a header without a time
            head = None
        if self.start_time is None and head is not None and head.tzinfo is not None:
            self.start_time = head + timedelta(seconds=start)
        self.warnings = [w for tb in tbs.values() for w in tb.warnings] + self._file_warnings()
        self._note()
        self._plan = True

    def _note(self) -> None:
        ref = self._where[self.channels[self.selected[0]]][0][0]
        parts = [self._tbs[ref].note().replace(f"@{ref}'", f"' of group {ref}")]
        shifted = [gi for gi in self._tbs if gi != ref and abs(self._off[gi]) > 1e-3]
        if shifted:
            how = ", ".join(f"group {gi} by {self._off[gi]:+.4g} samples"
                            + (" (interpolated)" if self._lerp[gi] else "")
                            for gi in shifted)
            parts.append(f"aligned on group {ref}'s grid: {how}")
        if len(self._tbs) > 1:
            parts.append(f"{len(self._tbs)} channel groups share the rate")
        self.time_note = "; ".join(parts)

    # ------------------------------------------------------------------ blocks
    def blocks(self, block_size: int = DEFAULT_BLOCK) -> Iterator[tuple[np.ndarray, float]]:
        if self._plan is None:
            self._make_plan()
        j0, j1 = self._span
        total = j1 - j0
        for a in range(j0, j1, block_size):
            b = min(j1, a + block_size)
            m = b - a
            out = np.empty((len(self.selected), m), dtype=np.float64)
            small = True
            for gi, members in self._groups.items():
                off = self._off[gi]
                lerp = self._lerp[gi]
                base = off if lerp else round(off)
                lo = math.floor(a + base + 1e-9)
                hi = lo + m + (1 if lerp else 0)
                self._feed(gi, hi)
                sigs = self._read(f"channel group {gi}", self._mdf.select,
                                  [(name, gi, ci) for _, name, ci in members],
                                  record_offset=lo, record_count=hi - lo, copy_master=False)
                f = (a + base) - lo
                for (pos, name, _), sig in zip(members, sigs):
                    x = np.asarray(sig.samples)
                    if x.size < hi - lo:
                        raise self.fail(f"channel {name!r}: {x.size} records where "
                                        f"{hi - lo} were expected from record {lo} (truncated?)")
                    if lerp:
                        x = x.astype(np.float64)
                        out[pos] = x[:m] + f * (x[1:m + 1] - x[:m])
                        small = False
                    else:
                        out[pos] = x[:m]
                        small &= x.dtype in (np.float32, np.int16, np.int8, np.uint8,
                                             np.uint16, np.bool_)
            yield (out.astype(np.float32) if small else out), (b - j0) / total
        for gi in self._tbs:
            self._feed(gi, self._mdf.groups[gi].channel_group.cycles_nr)
        self.warnings = [w for tb in self._tbs.values() for w in tb.warnings] + \
            self._file_warnings()
        self._fs = self._tbs[self._where[self.channels[self.selected[0]]][0][0]].rate_hz
        self._note()

    def _feed(self, gi: int, upto: int) -> None:
        """Check the time channel of group ``gi`` up to record ``upto``."""
        done = self._fed[gi]
        if upto <= done:
            return
        t = self._read(f"time channel of group {gi}", self._mdf.get_master, gi,
                       record_offset=done, record_count=upto - done)
        self._tbs[gi].feed(np.asarray(t, dtype=np.float64))
        self._fed[gi] = upto

    def close(self) -> None:
        f = getattr(self, "_mdf", None)
        if f is not None:
            try:
                f.close()
            finally:
                self._mdf = None


def _open_quietly(MDF, path):
    """``(MDF object, None)`` or ``(None, problem)``.

    asammdf's objects complain from ``__del__`` when their construction failed part-way
    (an ``AttributeError`` printed to stderr as "Exception ignored in ..."): that noise
    would follow the one-line error, so it is silenced while the broken object goes."""
    hook = sys.unraisablehook

    def quiet(u):
        if not type(u.object).__module__.startswith("asammdf") and \
                not str(getattr(u.object, "__module__", "")).startswith("asammdf"):
            hook(u)

    sys.unraisablehook = quiet
    try:
        try:
            return MDF(path), None
        except Exception as exc:  # asammdf raises many unrelated types for damaged files
            problem = describe(exc)
        gc.collect()
        return None, problem
    finally:
        sys.unraisablehook = hook
