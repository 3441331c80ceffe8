"""What every reader offers; one shared contract test (tests/ingest/test_reader_contract.py)
holds every reader to it.

A reader opens a file, says which channels it has, their common sample rate and (when the
format knows it) the number of samples, and then yields blocks of shape
``(n_channels, n)`` float32 or float64 (float32 where that holds the file's samples
exactly) in the file's own values (volts or engineering units, before
any probe sensitivity is applied), in order, never the whole file at once.

``select(names)`` narrows the blocks to those channels, in that order (a reader then reads
or converts only those: a CSV's other columns are not parsed). After the blocks,
``sample_rate_hz`` holds the rate refined over the whole file (a time column's fit, see
:mod:`rundash.ingest.timebase`); ``time_note`` says in one line where the rate came from,
``start_time`` is the record's start when the file says it (epoch time stamps, an MDF4
header), ``units`` the unit the file gives each channel (empty when it gives none), and
``warnings`` lists doubts about the file's time base.
"""

from __future__ import annotations

import importlib
import math
import stat
from abc import ABC, abstractmethod
from datetime import datetime
from pathlib import Path
from typing import Iterator, Sequence

import numpy as np

from rundash.errors import InputError
from rundash.model import DataSpec

DEFAULT_BLOCK = 1 << 16


class Reader(ABC):
    """Base class of the readers."""

    format: str = ""
    #: for a format read through an optional library: its name in messages, the library
    #: and the extra that installs it (``pip install 'rundash[extra]'``)
    title: str = ""
    library: str = ""
    extra: str = ""

    def __init__(self, path: str | Path, data: DataSpec | None = None):
        self.path = Path(path)
        self.data = data or DataSpec()
        self.channels: tuple[str, ...] = ()
        self.sample_rate_hz: float = float("nan")
        self.n_samples: int | None = None
        self.time_note: str = ""
        self.start_time: datetime | None = None
        self.units: dict[str, str] = {}
        self.warnings: list[str] = []
        self._sel: tuple[int, ...] | None = None
        try:
            st = self.path.stat()
        except FileNotFoundError:
            raise InputError(f"{self.path.name}: data file not found") from None
        except OSError as exc:
            raise InputError(f"{self.path.name}: cannot read the data file: {exc.strerror}"
                             ) from None
        if not stat.S_ISREG(st.st_mode):
            raise InputError(f"{self.path.name}: not a file (a folder or a device); expected a "
                             "data file")
        self.size_bytes = st.st_size
        if self.size_bytes == 0:
            raise InputError(f"{self.path.name}: the file is empty")

    @abstractmethod
    def blocks(self, block_size: int = DEFAULT_BLOCK) -> Iterator[tuple[np.ndarray, float]]:
        """Yield ``(block, fraction_done)``; block is (n_channels, n) float32 or float64.

        Non-finite samples are passed on: the importer refuses them, naming channel and
        sample (the CSV reader refuses them itself, naming the row)."""

    def select(self, names: Sequence[str]) -> None:
        """Yield only these channels, in this order, from now on."""
        index = {c: i for i, c in enumerate(self.channels)}
        missing = [n for n in names if n not in index]
        if missing:
            raise self.fail(f"channel {missing[0]!r} is not in the file; the file has "
                            f"{listing(self.channels)}")
        self._sel = tuple(index[n] for n in names)

    @property
    def selected(self) -> tuple[int, ...]:
        """Indexes (into ``channels``) of the channels the blocks hold."""
        return self._sel if self._sel is not None else tuple(range(len(self.channels)))

    def close(self) -> None:  # pragma: no cover - readers without resources
        pass

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    # helpers shared by readers
    def fail(self, msg: str) -> InputError:
        return InputError(f"{self.path.name}: {msg}")

    def need(self, module: str):
        """Import ``module`` of the format's optional library, or fail naming the extra."""
        try:
            return importlib.import_module(module)
        except ImportError:  # pragma: no cover - depends on the install
            raise InputError(f"{self.path.name}: reading {self.title} needs {self.library}: "
                             f"pip install 'rundash[{self.extra}]'") from None

    def unreadable(self, problem: BaseException | str, hint: str = "") -> InputError:
        """The error for a file the format's library cannot open: the problem (an
        exception's type and first line) and what was expected (``hint``)."""
        if isinstance(problem, BaseException):
            problem = describe(problem)
        return self.fail(f"not a readable {self.title} file ({problem}){hint}")

    def _check_rate(self, fs: float | None, where: str) -> float:
        if fs is None or not math.isfinite(fs) or fs <= 0:
            raise self.fail(f"no usable sample rate ({where}); expected a positive number of "
                            "samples per second: give a time column or [data].sample_rate_hz")
        return float(fs)

    def _agree_rate(self, fs: float, where: str) -> float:
        """The file's own rate ``fs``; refused when ``[data].sample_rate_hz`` says otherwise
        (by more than 0.1 %): a wrong declaration would shift every speed silently."""
        declared = self.data.sample_rate_hz
        if declared is not None and abs(declared - fs) > 1e-3 * fs:
            raise self.fail(f"sample rate {fs:.6g} Hz from the {where} disagrees with "
                            f"[data].sample_rate_hz = {declared:.6g} Hz; expected one sample "
                            "rate: correct the machine description or drop its sample_rate_hz")
        return fs


def listing(names: Sequence[str], limit: int = 12) -> str:
    """Names joined by commas, the first ``limit`` of them and a count of the rest."""
    if len(names) <= limit:
        return ", ".join(names)
    return f"{', '.join(names[:limit])} and {len(names) - limit} more"


def describe(exc: BaseException) -> str:
    """An exception's type and its message on one line, at most 160 characters of it."""
    return f"{type(exc).__name__}: {' '.join(str(exc).split())[:160]}"
