"""HDF5 reader (needs the ``hdf5`` extra: h5py).

Layout: a group (``[data].dataset``, default the file's root) holding one 1-D numeric
dataset per channel, all the same length. The sample rate is the ``sample_rate_hz``
attribute of the group (or of the channel datasets), else a time dataset named by
``[data].time_column``, else ``[data].sample_rate_hz``.
"""

from __future__ import annotations

from typing import Iterator

import numpy as np

from rundash.errors import InputError
from rundash.ingest.base import DEFAULT_BLOCK, Reader, rate_from_times


class Hdf5Reader(Reader):
    format = "hdf5"

    def __init__(self, path, data=None):
        super().__init__(path, data)
        try:
            import h5py
        except ImportError:  # pragma: no cover - depends on the install
            raise InputError(f"{self.path.name}: reading HDF5 needs h5py: "
                             "pip install 'rundash[hdf5]'") from None
        try:
            self._f = h5py.File(self.path, "r")
        except OSError as exc:
            raise self.fail(f"not a readable HDF5 file ({exc})") from None
        gname = self.data.dataset or "/"
        if gname not in self._f:
            self.close()
            raise self.fail(f"group {gname!r} not found (set [data].dataset)")
        g = self._f[gname]
        if not isinstance(g, h5py.Group):
            self.close()
            raise self.fail(f"{gname!r} is not a group of channel datasets")
        tcol = self.data.time_column
        names = [k for k, v in g.items() if isinstance(v, h5py.Dataset) and k != tcol]
        if not names:
            self.close()
            raise self.fail(f"group {gname!r} holds no channel datasets")
        lengths = set()
        for k in names:
            ds = g[k]
            if ds.ndim != 1 or ds.dtype.kind not in "iuf":
                err = self.fail(f"channel {k!r}: expected a 1-D numeric dataset, got shape "
                                f"{ds.shape} of {ds.dtype}")
                self.close()  # after the message: a closed file's datasets have no shape
                raise err
            lengths.add(ds.shape[0])
        if len(lengths) != 1:
            self.close()
            raise self.fail(f"channels have different lengths {sorted(lengths)}; expected one "
                            "common length")
        self.channels = tuple(names)
        self._ds = [g[k] for k in names]
        small = all(ds.dtype in (np.float32, np.int16, np.int8, np.uint8, np.uint16)
                    for ds in self._ds)
        self._dtype = np.dtype(np.float32 if small else np.float64)
        self.n_samples = lengths.pop()
        if self.n_samples == 0:
            self.close()
            raise self.fail("channels hold no samples")
        fs = g.attrs.get("sample_rate_hz", self._ds[0].attrs.get("sample_rate_hz"))
        if fs is None and tcol is not None:
            if tcol not in g:
                self.close()
                raise self.fail(f"time dataset {tcol!r} not found")
            t = np.asarray(g[tcol][: min(self.n_samples, 4096)], dtype=np.float64)
            fs = rate_from_times(t, self.path.name, tcol, 0)
        from_file = fs is not None
        if fs is None:
            fs = self.data.sample_rate_hz
        try:
            try:
                fs = float(fs) if fs is not None else None
            except (TypeError, ValueError):
                raise self.fail(f"attribute sample_rate_hz is {fs!r}; expected a positive "
                                "number of samples per second") from None
            self.sample_rate_hz = self._check_rate(fs, "attribute sample_rate_hz")
            if from_file:
                self._agree_rate(self.sample_rate_hz, "file")
        except InputError:
            self.close()
            raise

    def blocks(self, block_size: int = DEFAULT_BLOCK) -> Iterator[tuple[np.ndarray, float]]:
        n = self.n_samples
        for start in range(0, n, block_size):
            stop = min(n, start + block_size)
            block = np.empty((len(self._ds), stop - start), dtype=self._dtype)
            for i, ds in enumerate(self._ds):
                if ds.dtype == self._dtype:
                    ds.read_direct(block[i], np.s_[start:stop])
                else:
                    block[i] = ds[start:stop]
            yield block, stop / n

    def close(self) -> None:
        f = getattr(self, "_f", None)
        if f is not None:
            f.close()
            self._f = None
