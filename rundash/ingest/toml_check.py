"""Validation of TOML files, worded one way: the machine description and guidance profiles.

Every message is ``"<file>: <key>: <what is wrong>"``: the file (or profile) first, then
the key's full path as the user writes it (``[machine].kind``, ``margin.below.cap_pct``),
then ``expected <what>, got <value>`` for a wrong type or range and
:func:`rundash.errors.invalid_value` for a value outside a set of choices. Unknown keys
are refused before anything is read, so a misspelt key is what the user hears about.

A table is read against a spec ``{key: (type, required)}``; the types are ``str``,
``float`` (any finite number), ``int`` (a whole number), ``bool``, ``list`` (of strings,
returned as a tuple), ``dict`` (a sub-table, returned as is) and ``TABLES`` (an array of
tables, ``[[name]]``).
"""

from __future__ import annotations

import math
import tomllib
from typing import Any

from rundash.errors import ConfigError, invalid_value
from rundash.ingest.bounds import Range, out_of_range

TABLES = "array of tables"
_EXPECTED = {str: "a string", float: "a number", int: "a whole number", bool: "true or false",
             list: "a list of strings", dict: "a table", TABLES: "an array of tables"}


def parse_toml(text: str, source: str) -> dict[str, Any]:
    """The parsed TOML of ``text``; a syntax error, or arrays and tables nested deeper than
    the standard library's reader can follow, is one :class:`ConfigError` naming
    ``source``."""
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{source}: not valid TOML: {exc}") from None
    except RecursionError:
        raise ConfigError(f"{source}: not a usable TOML file: arrays or tables are nested "
                          "hundreds of levels deep; expected plain keys and tables") from None


class TomlChecker:
    """Checks of one file's tables; ``source`` names the file in every message."""

    def __init__(self, source: str):
        self.source = source

    def fail(self, where: str, msg: str):
        raise ConfigError(f"{self.source}: {where}: {msg}")

    @staticmethod
    def key(where: str, key: str) -> str:
        return f"{where}.{key}" if where else key

    def table(self, raw: Any, where: str, spec: dict[str, tuple[Any, bool]]) -> dict[str, Any]:
        """The keys of ``spec`` present in ``raw``, checked and converted (module doc)."""
        if not isinstance(raw, dict):
            self.fail(where, f"expected a table, got {raw!r}")
        unknown = sorted(set(raw) - set(spec))
        if unknown:
            what = "table" if isinstance(raw[unknown[0]], (dict, list)) else "key"
            self.fail(self.key(where, unknown[0]),
                      f"unknown {what}; allowed keys: {', '.join(sorted(spec))}")
        out: dict[str, Any] = {}
        for key, (typ, required) in spec.items():
            kp = self.key(where, key)
            if key not in raw:
                if required and typ in (dict, TABLES):
                    self.fail(kp, f"missing required table; add the missing table {kp!r}")
                if required:
                    self.fail(kp, "missing required key")
                continue
            out[key] = self.value(kp, raw[key], typ)
        return out

    def value(self, kp: str, val: Any, typ: Any) -> Any:
        ok = {str: isinstance(val, str), bool: isinstance(val, bool),
              int: isinstance(val, int) and not isinstance(val, bool),
              float: isinstance(val, (int, float)) and not isinstance(val, bool),
              list: isinstance(val, list) and all(isinstance(x, str) for x in val),
              dict: isinstance(val, dict),
              TABLES: isinstance(val, list) and all(isinstance(x, dict) for x in val)}[typ]
        if not ok:
            self.fail(kp, f"expected {_EXPECTED[typ]}, got {val!r}")
        if typ is float:
            val = float(val)
            if not math.isfinite(val):
                self.fail(kp, f"expected a finite number, got {val!r}")
        return tuple(val) if typ is list else val

    def choice(self, kp: str, val: Any, allowed) -> None:
        if val not in allowed:
            self.fail(kp, invalid_value(kp.rsplit(".", 1)[-1], val,
                                        ", ".join(repr(a) for a in allowed)))

    def positive(self, kp: str, val: float | None) -> None:
        if val is not None and not val > 0:
            self.fail(kp, f"expected a positive value, got {val!r}")

    def in_range(self, kp: str, val: float | None, lo: float | None = None,
                 hi: float | None = None, *, open_lo: bool = False) -> None:
        """``lo <= val <= hi`` (``lo < val`` with ``open_lo``); None passes."""
        if val is None:
            return
        if (lo is not None and (val <= lo if open_lo else val < lo)) or \
                (hi is not None and val > hi):
            rng = " and ".join(([f"{'>' if open_lo else '>='} {lo:g}"] if lo is not None else [])
                               + ([f"<= {hi:g}"] if hi is not None else []))
            self.fail(kp, f"expected a number {rng}, got {val!r}")

    def within(self, kp: str, val: float | None, rng: Range) -> None:
        """``val`` inside the physical range ``rng`` (:mod:`rundash.ingest.bounds`); None
        passes."""
        if val is not None and (bad := out_of_range(val, rng)):
            self.fail(kp, bad)

    def non_empty(self, kp: str, val: str) -> None:
        if not val.strip():
            self.fail(kp, f"expected a non-empty name, got {val!r}")
