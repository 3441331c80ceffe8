"""CSV reader: a header row, then one row per sample.

Dialect: the delimiter (comma, semicolon or tab) and the decimal mark (point or comma) are
sniffed from the first lines unless ``[data].delimiter`` / ``[data].decimal`` set them; a
UTF-8 byte-order mark, quoted names and spaces around names are accepted (the header is
parsed with the standard library's csv module). Only the columns in use (the time column
and the channels :meth:`CsvReader.select` names) are converted to numbers, so text or gaps
in other columns do not matter, and the file is parsed in pieces of a few megabytes with
pandas' C parser, two pieces at once on two threads (the parser lets go of the interpreter
lock), so memory stays bounded however many rows or columns the file has. Rows
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
import os
import re
from collections import deque
from typing import Iterator

import numpy as np

from rundash.errors import InputError
from rundash.ingest.base import DEFAULT_BLOCK, Reader, listing
from rundash.ingest.timebase import FIT_ROWS, TimeBase, parse_time_name

MAX_HEADER_BYTES = 1 << 20
#: Fields handed to pandas' parser at a time: its tokenizer keeps about 16 bytes per field
#: beside the text, so a piece is sized by its fields (about 5 MB of text of a 16-column
#: file, 1 MB of a 1000-column one), never more than PIECE_BYTES.
PIECE_FIELDS = 1 << 19
PIECE_BYTES = 8 << 20
MIN_PIECE_BYTES = 1 << 18
#: Pieces parsed at once, each on its own thread (two cores are what a site laptop has):
#: pandas' C parser lets go of the interpreter lock while it tokenizes and converts.
PARSE_THREADS = max(1, min(2, os.cpu_count() or 1))
#: Pieces in memory at once (parsed or being parsed).
AHEAD = PARSE_THREADS + 1
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
        self._piece_bytes = int(np.clip(PIECE_FIELDS * row_bytes / self._n_fields,
                                        MIN_PIECE_BYTES, PIECE_BYTES))
        self._head_bytes = int(min(self._piece_bytes, HEAD_ROWS * row_bytes))
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
        gen = self._pieces([pos], first_bytes=self._head_bytes)
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
        _feed(tb, np.concatenate(times))
        self._tb = tb
        self.start_time = tb.start_time
        self.warnings = list(tb.warnings)
        self.time_note = tb.note()

    # ------------------------------------------------------------------ parsing
    def _read(self, fields: list[int], source, *, dtype=np.float64, quoted: bool = True):
        """pandas' C parser on ``source`` (a piece of the data rows: no header). Spaces
        around numbers are read either way; skipping the spaces before each field (a
        quarter of the parse) matters only to a quote after them."""
        return self._pd.read_csv(source, sep=self._delim, decimal=self._decimal, header=None,
                                 names=list(range(self._n_fields)), usecols=fields,
                                 engine="c", encoding="utf-8", skipinitialspace=quoted,
                                 dtype=dtype)

    def _parsed(self):
        """A generator of ``(array (n_fields_used, m) float64, fraction)`` per parsed piece,
        every value finite and every row no longer than the header."""
        fields, self._trow, self._crows = self._columns()
        return self._pieces(fields)

    def _pieces(self, fields, first_bytes: int | None = None):
        """Parse the data rows in pieces of about :data:`PIECE_FIELDS` fields, each cut
        after a line end, on :data:`PARSE_THREADS` threads at once (pandas' C parser lets
        go of the interpreter lock while it tokenizes and converts, and so does numpy),
        and yield each piece's values in file order. A piece's rows are numbered once the
        pieces before it are known, so every message names the row as a serial read
        would. ``first_bytes`` makes the first piece shorter (the opening check of the
        time column)."""
        from concurrent.futures import ThreadPoolExecutor

        fd = os.open(self.path, os.O_RDONLY)
        cuts = _cuts(fd, self._data_offset, self.size_bytes, self._piece_bytes,
                     first_bytes)
        pool = ThreadPoolExecutor(PARSE_THREADS, thread_name_prefix="rundash-csv")
        ahead: deque = deque()
        start = 0

        def top_up(n: int) -> None:
            while len(ahead) < n and (cut := next(cuts, None)) is not None:
                ahead.append((cut, pool.submit(self._parse_piece, fd, fields, *cut)))

        try:
            top_up(1 if first_bytes else AHEAD)  # a short first piece alone
            while ahead:
                (a, b), fut = ahead.popleft()
                arr, problem = fut.result()
                if problem is not None:
                    raise problem(start)
                top_up(AHEAD)
                if arr.shape[1]:
                    start += arr.shape[1]
                    yield arr, min(1.0, b / self.size_bytes)
        finally:
            for _, fut in ahead:
                fut.cancel()
            pool.shutdown(wait=True)
            os.close(fd)
        self.n_samples = start

    def _parse_piece(self, fd: int, fields, a: int, b: int):
        """``(array (n_fields_used, m) float64, None)`` of the bytes ``[a, b)`` of the
        file, or ``(None, problem)`` where ``problem(rows_before)`` is the error naming
        the row (in a worker thread: nothing here may raise)."""
        pd = self._pd
        names = {k: self._names[f] for k, f in enumerate(fields)}
        try:
            data = os.pread(fd, b - a, a)
            delim, expect = self._delim.encode(), self._n_fields - 1
            lines, delims, quoted = _totals(data, delim)
            checked = False
            if quoted or delims != expect * lines:
                if (long_row := _long_row(data, delim, expect)) is not None:
                    return None, self._long_problem(*long_row)
                checked = True
            if not data or data.isspace():
                return np.empty((len(fields), 0)), None
            try:
                df = self._read(fields, io.BytesIO(data), quoted=quoted)
            except UnicodeDecodeError:  # a ValueError: caught first
                try:
                    data.decode("utf-8")
                    at = 0
                except UnicodeDecodeError as exc:
                    at = exc.start
                i = data.count(b"\n", 0, at)
                return None, lambda s: self.fail(f"near row {s + 2 + i}: not UTF-8 text (byte "
                                                 f"{a + at} of the file)")
            except ValueError as exc:
                found = self._locate(fields, names, data)
                if found is not None:
                    i, k, text = found
                    return None, lambda s: self.fail(
                        f"column {names[k]!r}, row {s + 2 + i}: {text!r} is not a number; "
                        "expected numbers only in the columns used")
                return None, lambda s: self.fail(
                    f"near row {s + 2}: {_short(exc)}; expected numbers only, "
                    f"{self._n_fields} columns per row")
            except pd.errors.ParserError as exc:
                return None, lambda s: self.fail(
                    f"near row {s + 2}: {_short(exc)}; expected numbers only, "
                    f"{self._n_fields} columns per row")
            if len(df) != lines and not checked:  # blank lines: the totals do not settle it
                if (long_row := _long_row(data, delim, expect)) is not None:
                    return None, self._long_problem(*long_row)
            arr = np.ascontiguousarray(df.to_numpy(np.float64).T)
            del df
            bad = ~np.isfinite(arr)
            if bad.any():
                k, idx = (int(v) for v in np.argwhere(bad)[0])
                what = "time column" if k == self._trow else "channel"
                return None, lambda s: self.fail(
                    f"{what} {names[k]!r}, row {s + 2 + idx}: value is not a finite number "
                    "(empty, NaN, infinite or missing)")
            return arr, None
        except BaseException as exc:  # pragma: no cover - an unforeseen failure, raised
            return None, lambda s, exc=exc: _reraise(exc)

    def _long_problem(self, i: int, n: int):
        return lambda s: self.fail(
            f"row {s + 2 + i} has {n} columns; expected {self._n_fields} columns, as the "
            f"header row ({_SHOWN[self._delim]}-separated)")

    def _locate(self, fields, names, data: bytes) -> tuple[int, int, str] | None:
        """(row in the piece, column, text) of the first cell of ``data`` that is not a
        number, or None."""
        pd = self._pd
        try:
            df = self._read(fields, io.BytesIO(data), dtype=str)
            for k, col in enumerate(df.columns):
                s = df[col]
                txt = s.str.replace(",", ".") if self._decimal == "," else s
                num = pd.to_numeric(txt, errors="coerce")
                bad = np.flatnonzero(s.notna().to_numpy() & num.isna().to_numpy())
                if bad.size:
                    i = int(bad[0])
                    return i, k, str(s.iloc[i])[:40]
        except (ValueError, pd.errors.ParserError):
            pass
        return None

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
                    _feed(tb, arr[self._trow])
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


def _cuts(fd: int, start: int, size: int, step: int, first: int | None = None):
    """Byte ranges ``(a, b)`` covering ``[start, size)`` of the file, each about ``step``
    long (the first ``first``) and each but the last ending just after a line end."""
    a, want = start, first or step
    while a < size:
        b = a + want
        while b < size:
            window = os.pread(fd, 1 << 16, b)
            if not window:  # the file ends sooner than its size said (cut short meanwhile)
                b = size
                break
            nl = window.find(b"\n")
            if nl >= 0:
                b += nl + 1
                break
            b += len(window)
        b = min(b, size)
        yield a, b
        a, want = b, step


def _totals(body: bytes, delim: bytes) -> tuple[int, int, bool]:
    """(lines, delimiters, holds a quote) of a piece: numpy's counts, off the
    interpreter lock, a megabyte at a time (no temporary the size of the piece)."""
    a = np.frombuffer(body, dtype=np.uint8)
    step = 1 << 20
    hit = np.empty(min(step, a.size), dtype=bool)
    lines = delims = 0
    for k in range(0, a.size, step):
        part = a[k:k + step]
        h = hit[:part.size]
        lines += int(np.count_nonzero(np.equal(part, 10, out=h)))
        delims += int(np.count_nonzero(np.equal(part, delim[0], out=h)))
    return lines + (0 if body.endswith(b"\n") else 1), delims, body.find(b'"') >= 0


def _long_row(body: bytes, delim: bytes, expect: int) -> tuple[int, int] | None:
    """``(row in the piece, its number of fields)`` of the first row of ``body`` with more
    than ``expect + 1`` fields (blank lines not counted as rows, quoted lines not judged:
    a quoted field may hold the delimiter), or None. pandas ignores extra fields when it
    converts only some columns, and takes them as an index in a piece's first row, so the
    reader counts the delimiters itself, line by line here (the piece's totals, which
    settle the usual case, are :func:`_totals`)."""
    a = np.frombuffer(body, dtype=np.uint8)
    quoted = body.find(b'"') >= 0
    if not body.endswith(b"\n"):
        a = np.frombuffer(body + b"\n", dtype=np.uint8)
    nl = np.flatnonzero(a == 10)
    starts = np.concatenate(([0], nl[:-1] + 1))
    lens = nl - starts
    first = a[np.minimum(starts, a.size - 1)]
    is_blank = (lens == 0) | ((lens == 1) & (first == 13))

    def per_line(byte: int) -> np.ndarray:
        pos = np.flatnonzero(a == byte)
        return np.diff(np.concatenate(([0], np.searchsorted(pos, nl))))

    count = per_line(delim[0])
    if quoted:
        count[per_line(34) > 0] = 0
    count = count[~is_blank]
    bad = np.flatnonzero(count > expect)
    if bad.size:
        i = int(bad[0])
        return i, int(count[i]) + 1
    return None


def _feed(tb: TimeBase, t: np.ndarray) -> None:
    """Feed time stamps in blocks of FIT_ROWS: the first fit sees the first FIT_ROWS rows
    (a piece may hold more), and each block's last rows give its resolution."""
    for k in range(0, t.size, FIT_ROWS):
        tb.feed(t[k:k + FIT_ROWS])


def _reraise(exc: BaseException):
    raise exc


def _short(exc: Exception) -> str:
    return str(exc).strip().splitlines()[-1][:200]
