"""CSV reader: a header row, then one row per sample.

Time comes from a time column in seconds (``[data].time_column``, or a column named
``time_s``/``time``/``t`` when present) or from ``[data].sample_rate_hz``. Read in chunks
with pandas' C parser, so memory stays bounded for files of any size.
"""

from __future__ import annotations

from typing import Iterator

import numpy as np

from rundash.ingest.base import DEFAULT_BLOCK, Reader, check_time_continues, rate_from_times

_TIME_NAMES = ("time_s", "time", "t")
MAX_HEADER_BYTES = 1 << 20


class CsvReader(Reader):
    format = "csv"

    def __init__(self, path, data=None):
        super().__init__(path, data)
        import pandas as pd

        self._pd = pd
        with open(self.path, "rb") as fh:
            head = fh.read(MAX_HEADER_BYTES)
        if b"\x00" in head:
            raise self.fail("binary content (NUL bytes) where CSV text was expected")
        first_nl = head.find(b"\n")
        if first_nl < 0 and len(head) == MAX_HEADER_BYTES:
            raise self.fail(f"header row longer than {MAX_HEADER_BYTES} bytes; expected a header "
                            "row of column names")
        header_line = head if first_nl < 0 else head[:first_nl]
        try:
            header = header_line.decode("utf-8").strip().lstrip("\ufeff")
        except UnicodeDecodeError as exc:
            raise self.fail(f"header row is not UTF-8 text (byte {exc.start}); expected a "
                            "header row of column names") from None
        names = [c.strip() for c in header.split(",")]
        if len(names) == 1:
            sep = next((c for c in (";", "\t", "|") if c in header), None)
            if sep is not None:
                raise self.fail(f"the header row holds one column separated by {sep!r}; expected "
                                "comma-separated columns")
        if not names or any(not n for n in names):
            raise self.fail("header row has an empty column name; expected names separated by commas")
        if len(set(names)) != len(names):
            dup = next(n for n in names if names.count(n) > 1)
            raise self.fail(f"header names column {dup!r} twice")
        self._names = names
        tcol = self.data.time_column
        if tcol is None:
            # a time column is used (and checked against any declared rate) when present
            tcol = next((n for n in _TIME_NAMES if n in names), None)
        if tcol is not None and tcol not in names:
            raise self.fail(f"time column {tcol!r} not found; columns are {', '.join(names)}")
        self._tcol = tcol
        self.channels = tuple(n for n in names if n != tcol)
        if not self.channels:
            raise self.fail("no data columns besides the time column")
        if tcol is None:
            self.sample_rate_hz = self._check_rate(self.data.sample_rate_hz, "[data].sample_rate_hz")
        else:
            first = self._read_chunks(2048)
            try:
                df = next(first)
            except StopIteration:
                raise self.fail("header only: no data rows") from None
            except UnicodeDecodeError as exc:  # a ValueError: caught first
                raise self.fail(f"in the first 2048 rows: not UTF-8 text (byte {exc.start})"
                                ) from None
            except (ValueError, self._pd.errors.ParserError) as exc:
                raise self.fail(f"in the first 2048 rows: {self._short(exc)}; expected numbers "
                                f"only, {len(names)} columns per row") from None
            if df.empty:
                raise self.fail("header only: no data rows")
            t = df[tcol].to_numpy(np.float64)
            self._check_finite_col(t, tcol, 2)
            self.sample_rate_hz = self._agree_rate(
                rate_from_times(t, self.path.name, tcol, 2), f"time column {tcol!r}")
            self._t0 = float(t[0])

    def _read_chunks(self, rows: int):
        pd = self._pd
        try:
            return pd.read_csv(self.path, chunksize=rows, dtype=np.float64, engine="c",
                               encoding="utf-8", skipinitialspace=True)
        except UnicodeDecodeError as exc:
            raise self.fail(f"not UTF-8 text (byte {exc.start}); expected UTF-8 CSV") from None

    def _check_finite_col(self, x: np.ndarray, col: str, first_row: int) -> None:
        bad = np.flatnonzero(~np.isfinite(x))
        if bad.size:
            i = int(bad[0])
            raise self.fail(f"column {col!r}, row {first_row + i}: value {x[i]!r} is not a "
                            "finite number (empty or not numeric)")

    def blocks(self, block_size: int = DEFAULT_BLOCK) -> Iterator[tuple[np.ndarray, float]]:
        start = 0
        any_rows = False
        try:
            reader = self._read_chunks(block_size)
            for df in reader:
                any_rows = True
                row0 = start + 2  # file row numbers: the header is row 1
                if list(df.columns) != self._names:
                    raise self.fail(f"row {row0}: columns changed")
                if self._tcol is not None:
                    t = df[self._tcol].to_numpy(np.float64)
                    self._check_finite_col(t, self._tcol, row0)
                    check_time_continues(t, self.sample_rate_hz, start, self._t0, self.path.name,
                                         self._tcol, row0)
                block = df[list(self.channels)].to_numpy(np.float64).T
                if not np.isfinite(block).all():
                    ch, idx = np.argwhere(~np.isfinite(block))[0]
                    raise self.fail(f"channel {self.channels[ch]!r}, row {row0 + idx}: value is "
                                    "not a finite number (empty, NaN, infinite or missing)")
                start += block.shape[1]
                yield block, self._progress(reader)
        except UnicodeDecodeError as exc:  # a ValueError: caught first
            raise self.fail(f"near row {start + 2}: not UTF-8 text (byte {exc.start})") from None
        except (ValueError, self._pd.errors.ParserError) as exc:
            raise self.fail(f"near row {start + 2}: {self._short(exc)}; expected numbers only, "
                            f"{len(self._names)} columns per row") from None
        if not any_rows:
            raise self.fail("header only: no data rows")
        self.n_samples = start

    def _progress(self, reader) -> float:
        try:
            return min(1.0, reader.handles.handle.buffer.tell() / self.size_bytes)
        except (AttributeError, OSError, ValueError):
            try:
                return min(1.0, reader.handles.handle.tell() / self.size_bytes)
            except (AttributeError, OSError, ValueError):
                return 0.0

    @staticmethod
    def _short(exc: Exception) -> str:
        return str(exc).strip().splitlines()[-1][:200]
