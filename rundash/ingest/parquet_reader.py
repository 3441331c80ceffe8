"""Parquet reader (needs the ``parquet`` extra: pyarrow).

One numeric column per channel, one row per sample. The sample rate is the file's
key-value metadata ``sample_rate_hz``, else ``[data].sample_rate_hz``, else a time column
(``[data].time_column``, or a column whose name says time: ``time_s``, ``time``,
``Time [ms]``, ...; an Arrow timestamp column counts as epoch time in its own unit) through
:class:`~rundash.ingest.timebase.TimeBase`; with a rate given, the time column is checked
against it. Read batch by batch, only the columns in use.
"""

from __future__ import annotations

from typing import Iterator

import numpy as np

from rundash.ingest.base import DEFAULT_BLOCK, Reader, listing
from rundash.ingest.timebase import FIT_ROWS, TimeBase, parse_time_name

_ARROW_UNITS = {"s": "s", "ms": "ms", "us": "us", "ns": "ns"}


class ParquetReader(Reader):
    format = "parquet"
    title, library, extra = "Parquet", "pyarrow", "parquet"

    def __init__(self, path, data=None):
        super().__init__(path, data)
        pq, pt = self.need("pyarrow.parquet"), self.need("pyarrow.types")
        try:
            self._pf = pq.ParquetFile(self.path)
        except Exception as exc:  # pyarrow raises several unrelated types for bad files
            raise self.unreadable(exc) from None
        schema = self._pf.schema_arrow
        names = list(schema.names)
        tcol = self.data.time_column
        if tcol is not None and tcol not in names:
            raise self.fail(f"time column {tcol!r} not found; columns are {listing(names)}")
        if tcol is None:
            tcol = next((n for n in names if parse_time_name(n)[0]
                         or pt.is_timestamp(schema.field(n).type)), None)
        tunit = None
        for f in schema:
            if f.name == tcol and pt.is_timestamp(f.type):
                tunit = _ARROW_UNITS[f.type.unit]
            elif not (pt.is_floating(f.type) or pt.is_integer(f.type)):
                raise self.fail(f"column {f.name!r} is {f.type}; expected a numeric column")
        self._tcol = tcol
        self.channels = tuple(n for n in names if n != tcol)
        if not self.channels:
            raise self.fail("no data columns besides the time column")
        self.n_samples = self._pf.metadata.num_rows
        if self.n_samples == 0:
            raise self.fail("no rows")
        meta = schema.metadata or {}
        fs, where = None, "time column, metadata or [data].sample_rate_hz"
        if b"sample_rate_hz" in meta:
            try:
                fs = float(meta[b"sample_rate_hz"])
            except ValueError:
                raise self.fail("metadata sample_rate_hz is not a number") from None
            where = "file metadata sample_rate_hz"
            fs = self._agree_rate(self._check_rate(fs, where), "file metadata")
        elif self.data.sample_rate_hz is not None:
            fs, where = self.data.sample_rate_hz, "[data].sample_rate_hz"
        self._tb = None
        if tcol is not None:
            self._tb = TimeBase(self.path.name, tcol, declared_hz=fs, declared_where=where,
                                unit=tunit, unit_from="its Arrow timestamp type")
            first = next(self._pf.iter_batches(batch_size=FIT_ROWS, columns=[tcol]))
            self._tfed = first.num_rows
            self._tb.feed(self._times(first.column(0)))
            fs = self._tb.rate_hz
            self.start_time = self._tb.start_time
            self.warnings = list(self._tb.warnings)
            self.time_note = self._tb.note()
        self.sample_rate_hz = self._check_rate(fs, where)
        if tcol is None:
            self.time_note = f"{self.sample_rate_hz:.10g} Hz from {where}"

    @staticmethod
    def _times(col) -> np.ndarray:
        import pyarrow as pa
        import pyarrow.types as pt
        if pt.is_timestamp(col.type):
            col = col.cast(pa.int64())
        return col.to_numpy(zero_copy_only=False).astype(np.float64)

    def blocks(self, block_size: int = DEFAULT_BLOCK) -> Iterator[tuple[np.ndarray, float]]:
        start = 0
        chans = [self.channels[i] for i in self.selected]
        cols = chans + ([self._tcol] if self._tcol else [])
        for batch in self._pf.iter_batches(batch_size=block_size, columns=cols,
                                           use_threads=False):
            n = batch.num_rows
            if self._tb is not None:
                if start + n > self._tfed:
                    t = self._times(batch.column(len(chans)))
                    self._tb.feed(t[max(0, self._tfed - start):])
                    self._tfed = start + n
            arrs = [batch.column(i).to_numpy(zero_copy_only=False) for i in range(len(chans))]
            dt = np.float32 if all(a.dtype == np.float32 for a in arrs) else np.float64
            block = np.empty((len(arrs), n), dtype=dt)
            for i, a in enumerate(arrs):
                block[i] = a
            start += n
            yield block, start / self.n_samples
        if self._tb is not None:
            self.sample_rate_hz = self._tb.rate_hz
            self.time_note = self._tb.note()
            self.warnings = list(self._tb.warnings)
