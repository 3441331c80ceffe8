"""Parquet reader (needs the ``parquet`` extra: pyarrow).

One numeric column per channel, one row per sample. Time comes from a time column in
seconds (``[data].time_column`` or a column named ``time_s``), the file's key-value
metadata ``sample_rate_hz``, or ``[data].sample_rate_hz``. Read batch by batch.
"""

from __future__ import annotations

from typing import Iterator

import numpy as np

from rundash.errors import InputError
from rundash.ingest.base import DEFAULT_BLOCK, Reader, check_time_continues, rate_from_times


class ParquetReader(Reader):
    format = "parquet"

    def __init__(self, path, data=None):
        super().__init__(path, data)
        try:
            import pyarrow.parquet as pq
        except ImportError:  # pragma: no cover - depends on the install
            raise InputError(f"{self.path.name}: reading Parquet needs pyarrow: "
                             "pip install 'rundash[parquet]'") from None
        try:
            self._pf = pq.ParquetFile(self.path)
        except Exception as exc:  # pyarrow raises several unrelated types for bad files
            raise self.fail(f"not a readable Parquet file ({type(exc).__name__}: "
                            f"{str(exc)[:160]})") from None
        schema = self._pf.schema_arrow
        names = list(schema.names)
        tcol = self.data.time_column or ("time_s" if "time_s" in names else None)
        if tcol is not None and tcol not in names:
            raise self.fail(f"time column {tcol!r} not found; columns are {', '.join(names)}")
        for f in schema:
            import pyarrow.types as pt
            if not (pt.is_floating(f.type) or pt.is_integer(f.type)):
                raise self.fail(f"column {f.name!r} is {f.type}; expected a numeric column")
        self._tcol = tcol
        self.channels = tuple(n for n in names if n != tcol)
        if not self.channels:
            raise self.fail("no data columns besides the time column")
        self.n_samples = self._pf.metadata.num_rows
        if self.n_samples == 0:
            raise self.fail("no rows")
        meta = schema.metadata or {}
        fs = None
        if tcol is not None:
            first = next(self._pf.iter_batches(batch_size=4096, columns=[tcol]))
            t = first.column(0).to_numpy(zero_copy_only=False).astype(np.float64)
            fs = rate_from_times(t, self.path.name, tcol, 0)
            self._t0 = float(t[0])
        elif b"sample_rate_hz" in meta:
            try:
                fs = float(meta[b"sample_rate_hz"])
            except ValueError:
                raise self.fail("metadata sample_rate_hz is not a number") from None
        else:
            fs = self.data.sample_rate_hz
        self.sample_rate_hz = self._check_rate(fs, "time column, metadata or [data].sample_rate_hz")
        if tcol is not None or b"sample_rate_hz" in meta:
            self._agree_rate(self.sample_rate_hz, "time column" if tcol else "file metadata")

    def blocks(self, block_size: int = DEFAULT_BLOCK) -> Iterator[tuple[np.ndarray, float]]:
        start = 0
        cols = list(self.channels) + ([self._tcol] if self._tcol else [])
        for batch in self._pf.iter_batches(batch_size=block_size, columns=cols):
            arrs = [batch.column(i).to_numpy(zero_copy_only=False) for i in range(batch.num_columns)]
            n = batch.num_rows
            if self._tcol:
                t = arrs.pop().astype(np.float64)
                check_time_continues(t, self.sample_rate_hz, start, self._t0, self.path.name,
                                     self._tcol, start)
            dt = np.float32 if all(a.dtype == np.float32 for a in arrs) else np.float64
            block = np.empty((len(arrs), n), dtype=dt)
            for i, a in enumerate(arrs):
                block[i] = a
            start += n
            yield block, start / self.n_samples
