"""What every reader offers; one shared contract test (tests/ingest/test_reader_contract.py)
holds every reader to it.

A reader opens a file, says which channels it has, their common sample rate and (when the
format knows it) the number of samples, and then yields blocks of shape
``(n_channels, n)`` float32 or float64 (float32 where that holds the file's samples
exactly) in the file's own values (volts or engineering units, before
any probe sensitivity is applied), in order, never the whole file at once.
"""

from __future__ import annotations

import math
import stat
from abc import ABC, abstractmethod
from pathlib import Path
from typing import Iterator

import numpy as np

from rundash.errors import InputError
from rundash.model import DataSpec

DEFAULT_BLOCK = 1 << 16


class Reader(ABC):
    """Base class of the readers."""

    format: str = ""

    def __init__(self, path: str | Path, data: DataSpec | None = None):
        self.path = Path(path)
        self.data = data or DataSpec()
        self.channels: tuple[str, ...] = ()
        self.sample_rate_hz: float = float("nan")
        self.n_samples: int | None = None
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

    def close(self) -> None:  # pragma: no cover - readers without resources
        pass

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    # helpers shared by readers
    def fail(self, msg: str) -> InputError:
        return InputError(f"{self.path.name}: {msg}")

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

def rate_from_times(times: np.ndarray, name: str, column: str, first_row: int) -> float:
    """Sample rate from a time column; the time must step evenly (to 1 % of a step)."""
    if times.size < 2:
        raise InputError(f"{name}: time column {column!r} has fewer than two rows")
    d = np.diff(times)
    dt = float(np.median(d))
    if not dt > 0:
        raise InputError(f"{name}: time column {column!r} does not increase")
    bad = np.flatnonzero(np.abs(d - dt) > 0.01 * dt)
    if bad.size:
        i = int(bad[0])
        raise InputError(
            f"{name}: time column {column!r}, row {first_row + i + 1}: time "
            f"{float(times[i + 1])!r} s does not follow {float(times[i])!r} s by the sample "
            f"interval {dt:.6g} s "
            "(expected evenly spaced, increasing time)")
    return 1.0 / dt


def check_time_continues(times: np.ndarray, fs: float, start_index: int, t0: float, name: str,
                         column: str, first_row: int) -> None:
    """Check that a later block's times continue the sampling grid t0 + i/fs."""
    expect = t0 + (start_index + np.arange(times.size)) / fs
    bad = np.flatnonzero(np.abs(times - expect) > 0.5 / fs)
    if bad.size:
        i = int(bad[0])
        raise InputError(
            f"{name}: time column {column!r}, row {first_row + i}: time {float(times[i])!r} s is "
            "off the "
            f"sampling grid (expected {expect[i]:.9g} s: evenly spaced, increasing time)")
