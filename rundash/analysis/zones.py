"""Reference zone tables for vibration levels (ISO shaft displacement, bearing velocity).

These zones are for steady operation: during run-up and coast-down rundash shows them as a
reference, not a verdict (:mod:`rundash.analysis.limits`). The values are from memory,
not checked against the text of the standards; each table says so in ``confidence``.

``SHAFT_DISPLACEMENT``
    zone boundary (um p-p) = coefficient / sqrt(n), n shaft speed in rpm: ``ab``, ``bc``,
    ``cd`` are the A/B, B/C and C/D coefficients.
``BEARING_VELOCITY``
    mm/s rms, broadband, bearing housing: one row per machine group and support.

>>> [round(SHAFT_DISPLACEMENT[k] / 3600 ** 0.5) for k in ("ab", "bc", "cd")]
[80, 150, 220]
"""

from __future__ import annotations

from dataclasses import dataclass
from types import MappingProxyType

_ISO_10816_3 = dict(document="ISO 10816-3", edition="ISO 10816-3:2009",
                    clause="Annex A, Table A.1 and A.2", confidence="from memory")

SHAFT_DISPLACEMENT = MappingProxyType(dict(
    document="ISO 7919-3 (carried into ISO 20816-3)", edition="ISO 7919-3:2009",
    clause="Annex A, zone boundaries for relative shaft displacement",
    confidence="from memory", ab=4800.0, bc=9000.0, cd=13200.0))



def _table(source: dict, keys: tuple[str, ...], rows) -> tuple:
    """Rows of a zone table: the source, the row's keys, and its A/B, B/C, C/D values."""
    return tuple(MappingProxyType(dict(source, **dict(zip(keys + ("ab", "bc", "cd"), r))))
                 for r in rows)


BEARING_VELOCITY = _table(_ISO_10816_3, ("group", "support"), (
    ("group1", "rigid", 2.3, 4.5, 7.1), ("group1", "flexible", 3.5, 7.1, 11.0),
    ("group2", "rigid", 1.4, 2.8, 4.5), ("group2", "flexible", 2.3, 4.5, 7.1)))


def cite(table) -> str:
    """'document, edition, clause (confidence)' of a zone table."""
    return f"{table['document']}, {table['edition']}, {table['clause']} ({table['confidence']})"


# ISO 10816-7 (rotodynamic pumps, industrial applications), Annex A: housing velocity
# zones in mm/s rms by category (I: high reliability / critical service, II: general
# use) and rated power (above 200 kW, up to 200 kW). From memory, low confidence:
# confirm against the standard's table before relying on them.
_ISO_10816_7 = dict(document="ISO 10816-7 (carried into ISO 20816-7)", edition="ISO 10816-7:2009",
                    clause="Annex A, zone boundaries for pumps (table recalled, not checked)",
                    confidence="from memory")
PUMP_VELOCITY = _table(_ISO_10816_7, ("category", "power"), (
    ("I", "above-200kW", 3.5, 5.0, 7.6), ("I", "up-to-200kW", 2.5, 4.0, 6.6),
    ("II", "above-200kW", 4.2, 6.1, 7.6), ("II", "up-to-200kW", 3.2, 5.1, 6.6)))

# ISO 10816-2 (land-based steam turbines and generators above 50 MW at 1500, 1800, 3000
# and 3600 r/min), Annex A: bearing-housing velocity zones in mm/s rms. From memory.
_ISO_10816_2 = dict(document="ISO 10816-2 (carried into ISO 20816-2)", edition="ISO 10816-2:2009",
                    clause="Annex A, zone boundaries for large turbine-generator sets "
                           "(table recalled, not checked)", confidence="from memory")
LARGE_SET_VELOCITY = _table(_ISO_10816_2, ("speeds",), (
    ("1500/1800", 2.8, 5.3, 8.5), ("3000/3600", 3.8, 7.5, 11.8)))

_PART_OF_KIND = {"pump": "10816-7"}


@dataclass(frozen=True)
class ZoneSettings:
    """Which ISO part and class the zones are read from, and what is expected.

    ``part`` '10816-3' (industrial machines: ``group`` 'group1' above 300 kW or 'group2'
    15-300 kW, ``support`` 'rigid' or 'flexible'), '10816-7' (pumps: ``pump_category`` 'I'
    or 'II', ``pump_power`` 'above-200kW' or 'up-to-200kW') or '10816-2' (steam turbines and
    generators above 50 MW). ``new_machine``: a newly commissioned machine is expected in
    zone A (else zones A and B are acceptable for long-term operation). ``defaulted`` names
    the keys the machine description left out (said in every zone check).
    """

    part: str = "10816-3"
    group: str = "group1"
    support: str = "rigid"
    pump_category: str = "I"
    pump_power: str = "above-200kW"
    new_machine: bool = False
    defaulted: tuple[str, ...] = ()

    @classmethod
    def for_machine(cls, machine_kind: str, **given) -> "ZoneSettings":
        """Settings of a machine: ``given`` keys of the description, the rest by default
        (the part by the machine kind: pumps on ISO 10816-7, others ISO 10816-3)."""
        keys = ("part", "group", "support", "pump_category", "pump_power", "new_machine")
        vals = {k: v for k, v in given.items() if v is not None}
        if "part" not in vals:
            vals["part"] = _PART_OF_KIND.get(machine_kind, "10816-3")
        part = vals["part"]
        relevant = {"10816-3": ("group", "support"), "10816-7": ("pump_category", "pump_power"),
                    "10816-2": ()}[part]
        defaulted = tuple(k for k in ("part",) + relevant + ("new_machine",)
                          if k not in given or given[k] is None)
        return cls(**{k: vals[k] for k in keys if k in vals}, defaulted=defaulted)

    def velocity_row(self, speed_rpm: float):
        if self.part == "10816-7":
            return next(r for r in PUMP_VELOCITY if r["category"] == self.pump_category
                        and r["power"] == self.pump_power)
        if self.part == "10816-2":
            return LARGE_SET_VELOCITY[0 if speed_rpm < 2400.0 else 1]
        return next(r for r in BEARING_VELOCITY if r["group"] == self.group
                    and r["support"] == self.support)

    def describe(self) -> str:
        """e.g. 'ISO 10816-3, group1 (default), rigid support (default); zones A and B
        acceptable'."""
        def d(k):
            return " (default)" if k in self.defaulted else ""
        parts = [f"ISO {self.part}{d('part')}"]
        if self.part == "10816-3":
            parts += [f"{self.group}{d('group')}", f"{self.support} support{d('support')}"]
        elif self.part == "10816-7":
            parts += [f"category {self.pump_category}{d('pump_category')}",
                      f"rated power {self.pump_power}{d('pump_power')}"]
        expect = ("a new machine: zone A expected" if self.new_machine
                  else "zones A and B acceptable for long-term operation")
        return ", ".join(parts) + f"; {expect}{d('new_machine')}"

    def acceptable(self, zone: str) -> bool:
        return zone == "A" if self.new_machine else zone in ("A", "B")
