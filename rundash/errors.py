"""One exception tree for rundash, and its domain warnings.

Every error rundash raises on purpose derives from :class:`RundashError`; the CLI maps it
to exit code 1 with a single line, the dashboard to a visible alert. Messages name the
file, channel, row or parameter and say what was expected. The errors about a value —
a bad machine description or option, an unreadable file, a signal or data that cannot be
processed — are also :class:`ValueError`, and a run or machine that is not there is also
a :class:`LookupError`, so ordinary ``except ValueError`` code catches them.
"""

from __future__ import annotations

import math
import re

# numpy scalars print as np.float64(1.5) since numpy 2: messages show the plain number
_NUMPY_REPR = re.compile(r"\bnp\.(?:float|int|uint|complex|bool|str)\w*\(([^()]*(?:\([^()]*\))?"
                         r"[^()]*)\)")


def plain_text(message: str) -> str:
    """``message`` with numpy scalar reprs (``np.float64(nan)``) written as plain numbers.

    >>> plain_text("got np.float64(nan) and [np.int64(3), np.float32(0.5)]")
    'got nan and [3, 0.5]'
    """
    return _NUMPY_REPR.sub(r"\1", message) if "np." in message else message


def plain(value: object) -> str:
    """A value as a message shows it: numbers plainly (``nan``, ``1e+20``, ``3``), numpy
    scalars as the Python number they hold, text quoted, sequences element by element.

    >>> plain(float("nan")), plain(1e20), plain(3), plain("up"), plain([1.5, "a"])
    ('nan', '1e+20', '3', "'up'", "[1.5, 'a']")
    >>> plain(1e12), plain(3.9e-5), plain(25600.0), plain(123456789012.5)
    ('1e+12', '3.9e-05', '25600.0', '123456789012.5')
    """
    item = getattr(value, "item", None)
    if callable(item) and type(value).__module__ == "numpy" and getattr(value, "ndim", 1) == 0:
        value = item()
    if isinstance(value, bool) or value is None:
        return repr(value)
    if isinstance(value, float):
        if not math.isfinite(value) or value == 0 or 1e-4 <= abs(value) < 1e7:
            return repr(value)
        return next(t for t in (f"{value:.{k}g}" for k in range(1, 18)) if float(t) == value)
    if isinstance(value, int):
        return str(value)
    if isinstance(value, (list, tuple)):
        inner = ", ".join(plain(v) for v in value)
        return f"[{inner}]" if isinstance(value, list) else f"({inner}{',' if len(value) == 1 else ''})"
    return plain_text(repr(value))


class RundashError(Exception):
    """Root of every error rundash raises on purpose (numbers in the message plainly)."""

    def __init__(self, *args):
        if args and isinstance(args[0], str):
            args = (plain_text(args[0]), *args[1:])
        super().__init__(*args)


class ConfigError(RundashError, ValueError):
    """A machine description, guidance profile or option is invalid."""


class InputError(RundashError, ValueError):
    """A data file cannot be read as what it claims to be."""


class OptionError(RundashError):
    """A command-line option's value is invalid. Deliberately not a ValueError: argparse
    turns a ValueError from an option's type function into its own usage message (exit 2),
    while this one reaches the CLI's handler, which prints the message in one line (exit 1)."""


class StorageError(RundashError):
    """The database refused an operation or holds something unexpected."""


class DuplicateRunError(StorageError):
    """The same source file (by content hash) was imported before."""


class NotFoundError(StorageError, LookupError):
    """A run, machine or probe asked for does not exist."""


class NoDatabaseError(NotFoundError):
    """No database exists where one was named, and none was to be created."""

    def __init__(self, message: str, path: str = ""):
        super().__init__(message)
        self.path = path


class DspError(RundashError, ValueError):
    """Signal processing cannot proceed with the given signal or parameters."""


class TachError(DspError):
    """The once-per-rev reference is unusable (too few pulses, no edges, ...)."""


class AnalysisError(RundashError, ValueError):
    """Analysis cannot proceed with the given vectors or parameters."""


class RundashWarning(UserWarning):
    """Data is usable but doubtful; the warning is recorded with the run."""

    def __init__(self, *args):
        if args and isinstance(args[0], str):
            args = (plain_text(args[0]), *args[1:])
        super().__init__(*args)


class TachQualityWarning(RundashWarning):
    """Tach pulses were repaired (missing or extra pulses) or are irregular."""


class SignalQualityWarning(RundashWarning):
    """A probe signal looks clipped, dead or otherwise doubtful."""


class SweepRateWarning(RundashWarning):
    """The sweep through a critical is too fast for a quasi-steady reading."""


def invalid_value(name: str, got: object, allowed: str) -> str:
    """Word an input check the one way rundash words them all.

    >>> invalid_value("edge", "up", "'rising' or 'falling'")
    "Invalid value for 'edge': allowed 'rising' or 'falling', got 'up'"
    """
    return f"Invalid value for {name!r}: allowed {allowed}, got {plain(got)}"


def require_positive(name: str, value: float, allowed: str,
                     error: type[Exception] = AnalysisError) -> None:
    """Raise ``error`` worded by :func:`invalid_value` unless ``value > 0`` (NaN fails).

    >>> require_positive("match_tolerance_pct", -1.0, "a positive percentage")
    Traceback (most recent call last):
    ...
    rundash.errors.AnalysisError: Invalid value for 'match_tolerance_pct': allowed a positive percentage, got -1.0
    """
    if not value > 0:
        raise error(invalid_value(name, value, allowed))
