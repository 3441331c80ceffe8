"""A small progress bar for the terminal (stderr), and the callback type long work takes.

Long work reports ``progress(fraction, stage)`` with fraction in [0, 1]; faces decide how
to show it (this bar in the CLI, a status line in the dashboard).
"""

from __future__ import annotations

import sys
import time
from typing import Callable

Progress = Callable[[float, str], None]


class _NoProgress:
    """A progress callback that shows nothing (and, like :class:`Bar`, can be closed)."""

    def __call__(self, fraction: float, stage: str) -> None:
        pass

    def close(self) -> None:
        pass

    def __repr__(self) -> str:
        return "no_progress"


no_progress = _NoProgress()


class Bar:
    """A one-line progress bar on a stream (stderr by default), redrawn at most 10 x/s."""

    def __init__(self, stream=None, width: int = 30):
        self.stream = stream or sys.stderr
        self.width = width
        self._last = 0.0
        self._stage = ""
        self._t0 = time.monotonic()

    def __call__(self, fraction: float, stage: str) -> None:
        now = time.monotonic()
        if stage == self._stage and fraction < 1.0 and now - self._last < 0.1:
            return
        if stage != self._stage and self._stage:
            self.stream.write("\n")
            self._t0 = now
        self._stage = stage
        self._last = now
        self._draw(fraction, stage, end=False)

    def _draw(self, fraction: float, stage: str, end: bool) -> None:
        f = min(max(fraction, 0.0), 1.0)
        n = int(round(f * self.width))
        line = (f"\r{stage:<22.22} [{'#' * n}{'.' * (self.width - n)}] {100 * f:5.1f} % "
                f"{time.monotonic() - self._t0:6.1f} s")
        self.stream.write(line + ("\n" if end else ""))
        self.stream.flush()

    def close(self) -> None:
        if self._stage:
            self.stream.write("\n")
            self.stream.flush()
            self._stage = ""
