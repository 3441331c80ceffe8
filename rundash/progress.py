"""The callback type long work takes, and its terminal face (a tqdm bar on stderr).

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
    """The terminal face of a progress callback: one tqdm bar per stage on stderr.

    On a terminal each stage is one bar redrawn in place (tqdm, at most 10 x/s). When
    stderr is not a terminal (a log file, CI, a pipe) a redrawn bar would be glued into one
    long line, so each stage prints one line when it starts and one when it ends, with its
    time.
    """

    def __init__(self, stream=None):
        self.stream = stream or sys.stderr
        self._tty = bool(getattr(self.stream, "isatty", lambda: False)())
        self._bar = None
        self._stage = ""
        self._t0 = time.monotonic()

    def __call__(self, fraction: float, stage: str) -> None:
        f = min(max(float(fraction), 0.0), 1.0)
        if stage != self._stage:
            self._end_stage()
            self._stage = stage
            self._t0 = time.monotonic()
            if self._tty:
                from tqdm import tqdm
                self._bar = tqdm(total=1000, desc=f"{stage:<22.22}", file=self.stream,
                                 mininterval=0.1, leave=True,
                                 bar_format="{desc} {bar:30} {percentage:5.1f} % {elapsed}")
            else:
                self.stream.write(f"{stage} ...\n")
                self.stream.flush()
        if self._bar is not None:
            n = int(round(f * 1000))
            if n > self._bar.n:
                self._bar.update(n - self._bar.n)

    def _end_stage(self) -> None:
        if not self._stage:
            return
        if self._bar is not None:
            self._bar.close()
            self._bar = None
        else:
            self.stream.write(f"{self._stage} done in {time.monotonic() - self._t0:.1f} s\n")
            self.stream.flush()
        self._stage = ""

    def close(self) -> None:
        self._end_stage()
