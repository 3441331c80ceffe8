"""One exception tree for rundash, and its domain warnings.

Every error rundash raises on purpose derives from :class:`RundashError`; the CLI maps it
to exit code 1 with a single line, the dashboard to a visible alert. Messages name the
file, channel, row or parameter and say what was expected.
"""

from __future__ import annotations


class RundashError(Exception):
    """Root of every error rundash raises on purpose."""


class ConfigError(RundashError):
    """A machine description, guidance profile or option is invalid."""


class InputError(RundashError):
    """A data file cannot be read as what it claims to be."""


class StorageError(RundashError):
    """The database refused an operation or holds something unexpected."""


class DuplicateRunError(StorageError):
    """The same source file (by content hash) was imported before."""


class NotFoundError(StorageError):
    """A run, machine or probe asked for does not exist."""


class NoDatabaseError(NotFoundError):
    """No database exists where one was named, and none was to be created."""

    def __init__(self, message: str, path: str = ""):
        super().__init__(message)
        self.path = path


class DspError(RundashError):
    """Signal processing cannot proceed with the given signal or parameters."""


class TachError(DspError):
    """The once-per-rev reference is unusable (too few pulses, no edges, ...)."""


class AnalysisError(RundashError):
    """Analysis cannot proceed with the given vectors or parameters."""


class RundashWarning(UserWarning):
    """Data is usable but doubtful; the warning is recorded with the run."""


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
    return f"Invalid value for {name!r}: allowed {allowed}, got {got!r}"
