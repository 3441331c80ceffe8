"""HDF5 reader (needs the ``hdf5`` extra: h5py).

Layout: a group (``[data].dataset``, default the file's root) holding one 1-D numeric
dataset per channel, all the same length. The sample rate is the ``sample_rate_hz``
attribute of the group (or of the channel datasets), else ``[data].sample_rate_hz``, else
a time dataset (``[data].time_column``, or a dataset whose name says time: ``time``,
``time_s``, ``t``, ...; its unit from a ``units``/``unit`` attribute or its name) through
:class:`~rundash.ingest.timebase.TimeBase`. When a rate is given and a time dataset is
there too, the time dataset is checked against the rate.
"""

from __future__ import annotations

from typing import Iterator

import numpy as np

from rundash.errors import InputError
from rundash.ingest.base import DEFAULT_BLOCK, Reader
from rundash.ingest.timebase import FIT_ROWS, TimeBase, parse_time_name


class Hdf5Reader(Reader):
    format = "hdf5"
    title, library, extra = "HDF5", "h5py", "hdf5"

    def __init__(self, path, data=None):
        super().__init__(path, data)
        h5py = self.need("h5py")
        try:
            self._f = h5py.File(self.path, "r")
        except OSError as exc:
            raise self.unreadable(exc) from None
        try:
            self._open(h5py)
        except InputError:
            self.close()
            raise
        except (OSError, KeyError, ValueError, RuntimeError) as exc:  # h5py on a damaged file
            self.close()
            raise self.unreadable(exc) from None

    def _open(self, h5py) -> None:
        gname = self.data.dataset or "/"
        if gname not in self._f:
            raise self.fail(f"group {gname!r} not found (set [data].dataset)")
        g = self._f[gname]
        if not isinstance(g, h5py.Group):
            raise self.fail(f"{gname!r} is not a group of channel datasets")
        datasets = [k for k, v in g.items() if isinstance(v, h5py.Dataset)]
        tcol = self.data.time_column
        if tcol is not None and tcol not in g:
            raise self.fail(f"time dataset {tcol!r} not found")
        if tcol is None:
            tcol = next((k for k in datasets if parse_time_name(k)[0]
                         and g[k].ndim == 1 and g[k].dtype.kind in "iuf"), None)
        names = [k for k in datasets if k != tcol]
        if not names:
            raise self.fail(f"group {gname!r} holds no channel datasets")
        lengths = set()
        for k in names:
            ds = g[k]
            if ds.ndim != 1 or ds.dtype.kind not in "iuf":
                raise self.fail(f"channel {k!r}: expected a 1-D numeric dataset, got shape "
                                f"{ds.shape} of {ds.dtype}")
            lengths.add(ds.shape[0])
        if len(lengths) != 1:
            raise self.fail(f"channels have different lengths {sorted(lengths)}; expected one "
                            "common length")
        self.channels = tuple(names)
        self._ds = [g[k] for k in names]
        self.n_samples = lengths.pop()
        if self.n_samples == 0:
            raise self.fail("channels hold no samples")
        fs = g.attrs.get("sample_rate_hz", self._ds[0].attrs.get("sample_rate_hz"))
        where = "attribute sample_rate_hz"
        if fs is not None:
            try:
                fs = float(fs)
            except (TypeError, ValueError):
                raise self.fail(f"attribute sample_rate_hz is {fs!r}; expected a positive "
                                "number of samples per second") from None
            fs = self._agree_rate(self._check_rate(fs, where), "file")
        elif self.data.sample_rate_hz is not None:
            fs, where = self.data.sample_rate_hz, "[data].sample_rate_hz"
        self._t = None
        self._tb = None
        if tcol is not None:
            t = g[tcol]
            if t.ndim != 1 or t.dtype.kind not in "iuf":
                raise self.fail(f"time dataset {tcol!r}: expected a 1-D numeric dataset, got "
                                f"shape {t.shape} of {t.dtype}")
            if t.shape[0] != self.n_samples:
                raise self.fail(f"time dataset {tcol!r} has {t.shape[0]} values, the channels "
                                f"{self.n_samples}; expected one time per sample")
            unit = t.attrs.get("units", t.attrs.get("unit"))
            if isinstance(unit, bytes):
                unit = unit.decode("utf-8", errors="replace")
            self._tb = TimeBase(self.path.name, tcol, declared_hz=fs, declared_where=where,
                                what="time dataset",
                                unit=unit if isinstance(unit, str) and unit.strip() else None)
            self._t = t
            self._tfed = min(self.n_samples, FIT_ROWS)
            self._tb.feed(np.asarray(t[:self._tfed], dtype=np.float64))
            fs = self._tb.rate_hz
            self.start_time = self._tb.start_time
            self.warnings = list(self._tb.warnings)
            self.time_note = self._tb.note()
        else:
            self.time_note = f"{self._check_rate(fs, where):.10g} Hz from {where}"
        self.sample_rate_hz = self._check_rate(fs, where)

    def blocks(self, block_size: int = DEFAULT_BLOCK) -> Iterator[tuple[np.ndarray, float]]:
        n = self.n_samples
        ds = [self._ds[i] for i in self.selected]
        small = all(d.dtype in (np.float32, np.int16, np.int8, np.uint8, np.uint16) for d in ds)
        dtype = np.dtype(np.float32 if small else np.float64)
        for start in range(0, n, block_size):
            stop = min(n, start + block_size)
            if self._tb is not None and stop > self._tfed:
                self._tb.feed(np.asarray(self._t[max(start, self._tfed):stop], np.float64))
                self._tfed = stop
            block = np.empty((len(ds), stop - start), dtype=dtype)
            for i, d in enumerate(ds):
                if d.dtype == dtype:
                    d.read_direct(block[i], np.s_[start:stop])
                else:
                    block[i] = d[start:stop]
            yield block, stop / n
        if self._tb is not None:
            self.sample_rate_hz = self._tb.rate_hz
            self.time_note = self._tb.note()
            self.warnings = list(self._tb.warnings)

    def close(self) -> None:
        f = getattr(self, "_f", None)
        if f is not None:
            f.close()
            self._f = None
