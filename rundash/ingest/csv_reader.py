"""CSV reader: a header row, then one row per sample.

Dialect: the delimiter (comma, semicolon or tab) and the decimal mark (point or comma) are
sniffed from the first lines unless ``[data].delimiter`` / ``[data].decimal`` set them; a
UTF-8 byte-order mark, quoted names and spaces around names are accepted (the header is
parsed with the standard library's csv module). Only the columns in use (the time column
and the channels :meth:`CsvReader.select` names) are converted to numbers, so text or gaps
in other columns do not matter, and the file is parsed in pieces of a few megabytes with
pandas' C parser, so memory stays bounded however many rows or columns the file has. Rows
with more fields than the header are refused, naming the row (pandas does not check rows
when it converts only some columns, so the reader counts the delimiters itself).

Time comes from a time column (``[data].time_column``, or a column whose name says time:
``time``, ``t``, ``timestamp``, ``time_s``, ``Time [ms]``, ...) through
:class:`~rundash.ingest.timebase.TimeBase` (unit by name or step size, least-squares rate,
epoch time stamps), or from ``[data].sample_rate_hz``; when both are there the declared
rate governs and the time column is checked against it.
"""

from __future__ import annotations

import csv
import io
import re
from collections import deque
from typing import Iterator

import numpy as np

from rundash.errors import InputError
from rundash.ingest.base import DEFAULT_BLOCK, Reader, listing
from rundash.ingest.timebase import FIT_ROWS, TimeBase, parse_time_name

MAX_HEADER_BYTES = 1 << 20
#: Bytes of text handed to pandas' parser at a time (its tokenizer holds every field).
PARSE_BYTES = 16 << 20
#: Rows whose time stamps are checked when the file is opened.
HEAD_ROWS = 4096
_DELIMITERS = (",", ";", "\t")
_SHOWN = {",": "','", ";": "';'", "\t": "tab"}
_DECIMAL_COMMA = re.compile(r"^\s*[-+]?\d+,\d+(?:[eE][-+]?\d+)?\s*$")


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
        bom = 3 if head.startswith(b"\xef\xbb\xbf") else 0
        first_nl = head.find(b"\n")
        if first_nl < 0 and b"\r" in head:
            raise self.fail("lines end in a carriage return only (CR, an old Mac convention); "
                            "expected LF or CR LF line endings")
        if first_nl < 0 and len(head) == MAX_HEADER_BYTES:
            raise self.fail(f"header row longer than {MAX_HEADER_BYTES} bytes; expected a header "
                            "row of column names")
        try:
            header = head[bom:first_nl if first_nl >= 0 else len(head)].decode("utf-8")
        except UnicodeDecodeError as exc:
            raise self.fail(f"header row is not UTF-8 text (byte {exc.start}); expected a "
                            "header row of column names") from None
        if header.count('"') % 2:
            raise self.fail("the header row has an unclosed quote (\"); expected names, "
                            "each quoted or not")
        sample = head[bom:].decode("utf-8", errors="replace").splitlines()[1:21]
        if len(head) == MAX_HEADER_BYTES and sample:
            sample = sample[:-1]  # the last line may be cut
        sample = [s for s in sample if s.strip()]
        try:
            self._delim = self._pick_delimiter(header.rstrip("\r"),
                                               [x.rstrip("\r") for x in sample])
        except csv.Error as exc:
            raise self.fail(f"cannot read the first rows as CSV ({exc}); expected one row per "
                            "line") from None
        self._decimal = self._pick_decimal(sample)
        try:
            names = next(csv.reader([header.rstrip("\r")], delimiter=self._delim,
                                    skipinitialspace=True))
        except (csv.Error, StopIteration):
            raise self.fail("cannot read the header row; expected names separated by "
                            f"{_SHOWN[self._delim]}") from None
        names = [n.strip() for n in names]
        self._n_fields = len(names)
        if len(names) > 1 and names[-1] == "":
            names = names[:-1]  # a delimiter at the end of every line
        if not names or any(not n for n in names):
            raise self.fail("header row has an empty column name; expected names separated by "
                            f"{_SHOWN[self._delim]}")
        if len(set(names)) != len(names):
            dup = next(n for n in names if names.count(n) > 1)
            raise self.fail(f"header names column {dup!r} twice")
        self._names = names
        self._data_offset = bom + (first_nl + 1 if first_nl >= 0 else len(head))
        tcol = self.data.time_column
        if tcol is not None:
            tcol = tcol.strip()
            if tcol not in names:
                raise self.fail(f"time column {tcol!r} not found; columns are "
                                f"{listing(names)}")
        else:
            # a time column is used (and checked against any declared rate) when present
            tcol = next((n for n in names if parse_time_name(n)[0]), None)
        self._tcol = tcol
        self.channels = tuple(n for n in names if n != tcol)
        if not self.channels:
            raise self.fail("no data columns besides the time column")
        row_bytes = (np.mean([len(s.encode("utf-8")) + 1 for s in sample]) if sample
                     else len(header) + 1)
        self._parse_rows = int(np.clip(PARSE_BYTES // max(row_bytes, 1), 256, 1 << 16))
        self._tb: TimeBase | None = None
        self._pending: deque = deque()
        self._gen = None
        if tcol is None:
            self._fs = self._check_rate(self.data.sample_rate_hz, "[data].sample_rate_hz")
            self.time_note = (f"{self._fs:.10g} Hz from [data].sample_rate_hz (no time column)")
        else:
            self._check_head()

    def _check_head(self) -> None:
        """Check the time column of the first rows at once (the full fit waits until the
        channels in use are known, so the first rows are parsed with them only once)."""
        pos = self._names.index(self._tcol)
        gen = self._pieces([pos], max_rows=min(HEAD_ROWS, self._parse_rows))
        self._trow, self._crows = 0, []
        piece = next(gen, None)
        gen.close()
        if piece is None:
            raise self.fail("header only: no data rows")
        tb = TimeBase(self.path.name, self._tcol, declared_hz=self.data.sample_rate_hz,
                      first_row=2)
        tb.feed(piece[0][0])

    # ------------------------------------------------------------------ dialect
    def _pick_delimiter(self, header: str, sample: list[str]) -> str:
        declared = self.data.delimiter
        counts = {d: len(next(csv.reader([header], delimiter=d))) for d in _DELIMITERS}
        if declared not in (None, "auto"):
            if counts.get(declared, 2) == 1 and len(sample):
                other = next((d for d in _DELIMITERS if d != declared and counts[d] > 1), None)
                if other is not None:
                    sep = "comma-separated" if declared == "," else \
                        f"separated by {_SHOWN[declared]}"
                    raise self.fail(f"the header row holds one column separated by "
                                    f"{_SHOWN[other]!s}; [data].delimiter expects {sep} "
                                    "columns")
            return declared
        for d in _DELIMITERS:
            if d == "," and self.data.decimal == ",":
                continue
            if counts[d] > 1 and all(len(next(csv.reader([s], delimiter=d))) == counts[d]
                                     for s in sample):
                return d
        best = max(_DELIMITERS, key=lambda d: counts[d])
        return best if counts[best] > 1 else ","  # one column: refused below, by its names

    def _pick_decimal(self, sample: list[str]) -> str:
        declared = self.data.decimal
        if declared not in (None, "auto"):
            return declared
        if self._delim == ",":
            return "."
        fields = [f for s in sample for f in s.split(self._delim)]
        if any(_DECIMAL_COMMA.match(f) for f in fields) and not any("." in f for f in fields):
            return ","
        return "."

    # ------------------------------------------------------------------ selection
    def select(self, names) -> None:
        before = self.selected
        super().select(names)
        if self.selected != before and (self._pending or self._gen is not None):
            self._reset()

    def _reset(self) -> None:
        self._pending.clear()
        if self._gen is not None:
            self._gen.close()
        self._gen = None
        self._tb = None

    def _columns(self) -> tuple[list[int], int | None, list[int]]:
        """File field positions parsed; the time column's row and the channels' rows in the
        parsed array."""
        pos = {n: i for i, n in enumerate(self._names)}
        want = [pos[self.channels[i]] for i in self.selected]
        fields = sorted(set(want) | ({pos[self._tcol]} if self._tcol else set()))
        row = {f: k for k, f in enumerate(fields)}
        return fields, (row[pos[self._tcol]] if self._tcol else None), [row[f] for f in want]

    # ------------------------------------------------------------------ rate
    @property
    def sample_rate_hz(self) -> float:
        if self._tcol is not None and self._tb is None:
            self._prime()
        return self._tb.rate_hz if self._tb is not None else self._fs

    @sample_rate_hz.setter
    def sample_rate_hz(self, value: float) -> None:
        self._fs = float(value)

    def _prime(self) -> None:
        """Parse the first rows (at least FIT_ROWS) and fit the time base to them."""
        self._reset()
        self._gen = self._parsed()
        tb = TimeBase(self.path.name, self._tcol, declared_hz=self.data.sample_rate_hz,
                      first_row=2)
        times, n = [], 0
        for item in self._gen:
            self._pending.append(item)
            times.append(item[0][self._trow])
            n += item[0].shape[1]
            if n >= FIT_ROWS:
                break
        if n == 0:
            raise self.fail("header only: no data rows")
        tb.feed(np.concatenate(times))
        self._tb = tb
        self.start_time = tb.start_time
        self.warnings = list(tb.warnings)
        self.time_note = tb.note()

    # ------------------------------------------------------------------ parsing
    def _read(self, fields: list[int], *, dtype=np.float64, chunksize=None, skiprows=1,
              nrows=None, source=None):
        kw = dict(sep=self._delim, decimal=self._decimal, header=None, skiprows=skiprows,
                  names=list(range(self._n_fields)), usecols=fields, engine="c",
                  encoding="utf-8", skipinitialspace=True, dtype=dtype)
        if chunksize:
            kw["chunksize"] = chunksize
        if nrows:
            kw["nrows"] = nrows
        return self._pd.read_csv(self.path if source is None else source, **kw)

    def _parsed(self):
        """A generator of ``(array (n_fields_used, m) float64, fraction)`` per parsed piece,
        every value finite and every row no longer than the header."""
        fields, self._trow, self._crows = self._columns()
        return self._pieces(fields)

    def _pieces(self, fields, max_rows: int | None = None):
        pd = self._pd
        names = {k: self._names[f] for k, f in enumerate(fields)}
        counter = _CountingFile(self, self._data_offset, self._n_fields)
        start = 0
        try:
            try:
                reader = self._read(fields, chunksize=max_rows or self._parse_rows,
                                    source=counter)
            except (ValueError, pd.errors.ParserError) as exc:  # pandas reads the first row
                raise counter.problem or self.fail(
                    f"row 2: {_short(exc)}; expected {self._n_fields} columns per row, as the "
                    "header row") from None
            with reader:
                while True:
                    try:
                        df = next(reader)
                    except StopIteration:
                        break
                    except UnicodeDecodeError as exc:  # a ValueError: caught first
                        raise self.fail(f"near row {start + 2}: not UTF-8 text (byte "
                                        f"{exc.start})") from None
                    except ValueError as exc:
                        raise counter.problem or self._locate(fields, names, start, exc
                                                              ) from None
                    except pd.errors.ParserError as exc:
                        raise counter.problem or self.fail(
                            f"near row {start + 2}: {_short(exc)}; expected numbers only, "
                            f"{self._n_fields} columns per row") from None
                    if counter.problem is not None:
                        raise counter.problem
                    m = len(df)
                    arr = df.to_numpy(np.float64).T
                    bad = ~np.isfinite(arr)
                    if bad.any():
                        k, idx = np.argwhere(bad)[0]
                        what = ("time column" if k == self._trow else "channel")
                        raise self.fail(f"{what} {names[k]!r}, row {start + 2 + idx}: value is "
                                        "not a finite number (empty, NaN, infinite or missing)")
                    start += m
                    yield arr, min(1.0, counter.tell() / self.size_bytes)
            if counter.problem is not None:
                raise counter.problem
        except UnicodeDecodeError as exc:
            raise self.fail(f"near row {start + 2}: not UTF-8 text (byte {exc.start})") from None
        finally:
            counter.close()
        self.n_samples = start

    def _locate(self, fields, names, start, exc) -> InputError:
        """Name the cell that is not a number in the piece starting at ``start``."""
        pd = self._pd
        try:
            df = self._read(fields, dtype=str, skiprows=1 + start, nrows=self._parse_rows)
            for k, col in enumerate(df.columns):
                s = df[col]
                txt = s.str.replace(",", ".") if self._decimal == "," else s
                num = pd.to_numeric(txt, errors="coerce")
                bad = np.flatnonzero(s.notna().to_numpy() & num.isna().to_numpy())
                if bad.size:
                    i = int(bad[0])
                    return self.fail(f"column {names[k]!r}, row {start + 2 + i}: "
                                     f"{str(s.iloc[i])[:40]!r} is not a number; expected "
                                     "numbers only in the columns used")
        except (ValueError, pd.errors.ParserError):
            pass
        return self.fail(f"near row {start + 2}: {_short(exc)}; expected numbers only, "
                         f"{self._n_fields} columns per row")

    def blocks(self, block_size: int = DEFAULT_BLOCK) -> Iterator[tuple[np.ndarray, float]]:
        if self._tcol is not None and self._tb is None:
            self._prime()
        if self._gen is None:  # no time column, or blocks read before: start again
            if self._tcol is not None:
                self._prime()
            else:
                self._gen = self._parsed()
        pending, gen, tb = self._pending, self._gen, self._tb
        crows = self._crows
        out = np.empty((len(crows), block_size))
        fill = 0
        frac = 0.0
        any_rows = False
        while True:
            if pending:
                arr, frac = pending.popleft()  # its times the fit has seen already
            else:
                arr = next(gen, None)
                if arr is None:
                    break
                arr, frac = arr
                if tb is not None:
                    tb.feed(arr[self._trow])
            any_rows = True
            m = arr.shape[1]
            pos = 0
            while pos < m:
                take = min(m - pos, block_size - fill)
                out[:, fill:fill + take] = arr[crows, pos:pos + take]
                fill += take
                pos += take
                if fill == block_size:
                    yield out, frac
                    out = np.empty((len(crows), block_size))
                    fill = 0
        if not any_rows:
            raise self.fail("header only: no data rows")
        if fill:
            yield out[:, :fill], 1.0
        self._gen = None
        if tb is not None:
            self.time_note = tb.note()
            self.warnings = list(tb.warnings)


class _CountingFile(io.RawIOBase):
    """The file as pandas reads it, counting delimiters line by line on the way through,
    to refuse rows longer than the header (a decimal comma in a comma-separated file, a
    stray delimiter): pandas ignores extra fields when it converts only some columns. Rows
    with fewer fields are left to pandas, which gives their missing values as NaN (refused
    in used columns).

    Each piece pandas reads is first checked by its totals (``bytes.count``, fast); a piece
    whose totals do not add up, or that holds quotes, is checked line by line with numpy.
    A problem found is kept in :attr:`problem` (raised by the reader after the piece that
    pandas returns: an exception inside ``read`` would reach pandas' C parser)."""

    def __init__(self, reader: CsvReader, offset: int, n_fields: int):
        super().__init__()
        self.r = reader
        self.f = open(reader.path, "rb", buffering=0)
        self.offset = offset
        self.delim = reader._delim.encode()
        self.expect = n_fields - 1
        self.rows = 0
        self.pos = 0
        self.tail = b""
        self.problem: InputError | None = None

    def readable(self) -> bool:
        return True

    def readinto(self, b) -> int:
        n = self.f.readinto(b)
        if n is None:  # pragma: no cover - non-blocking files only
            return 0
        data = bytes(memoryview(b)[:n])
        skip = max(0, min(n, self.offset - self.pos))
        self.pos += n
        if self.problem is None:
            try:
                self._see(data[skip:] if skip else data, end=(n == 0))
            except InputError as exc:
                self.problem = exc
        return n

    def tell(self) -> int:
        return self.pos

    def close(self) -> None:
        self.f.close()
        super().close()

    def _see(self, data: bytes, *, end: bool) -> None:
        buf = self.tail + data if self.tail else data
        if end:
            self.tail = b""
            if buf.strip():
                self._check(buf + b"\n")
            return
        cut = buf.rfind(b"\n")
        if cut < 0:
            self.tail = buf
            return
        self.tail = buf[cut + 1:]
        stop = cut + 1
        if buf.find(b'"', 0, stop) < 0:
            lines = buf.count(b"\n", 0, stop)
            if buf.count(self.delim, 0, stop) == self.expect * lines:
                self.rows += lines  # the usual case: two counts, no copy
                return
        self._check(buf[:stop])

    def _check(self, body: bytes) -> None:
        lines = body.count(b"\n")
        if b'"' not in body:
            delims = body.count(self.delim)
            blank = (body.count(b"\n\n") + body.count(b"\n\r\n")
                     + (1 if body.startswith((b"\n", b"\r\n")) else 0))
            if delims <= self.expect * (lines - blank):
                self.rows += lines - blank
                return
        a = np.frombuffer(body, dtype=np.uint8)
        nl = np.flatnonzero(a == 10)
        starts = np.concatenate(([0], nl[:-1] + 1))
        lens = nl - starts
        first = a[np.minimum(starts, a.size - 1)]
        is_blank = (lens == 0) | ((lens == 1) & (first == 13))

        def per_line(byte: int) -> np.ndarray:
            pos = np.flatnonzero(a == byte)
            return np.diff(np.concatenate(([0], np.searchsorted(pos, nl))))

        count = per_line(self.delim[0])
        if b'"' in body:
            count[per_line(34) > 0] = 0  # quoted fields may hold the delimiter: not judged
        count = count[~is_blank]
        bad = np.flatnonzero(count > self.expect)
        if bad.size:
            i = int(bad[0])
            raise self.r.fail(f"row {self.rows + 2 + i} has {int(count[i]) + 1} columns; "
                              f"expected {self.expect + 1} columns, as the header row "
                              f"({_SHOWN[self.r._delim]}-separated)")
        self.rows += count.size


def _short(exc: Exception) -> str:
    return str(exc).strip().splitlines()[-1][:200]
