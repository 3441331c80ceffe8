"""Units policy: storage units, display units and the only conversion factors in rundash.

Storage units (what the database and the dsp/analysis layers hold):

============== ======================== =====================================
transducer     stored unit              filtered-vector amplitude convention
============== ======================== =====================================
proximity      micrometre (``um``)      peak-to-peak (2 x |complex nX|)
velocity       mm/s (``mm/s``)          peak (|complex nX|); overall as rms
acceleration   m/s^2 (``m/s2``)         peak (|complex nX|); overall as rms
============== ======================== =====================================

Display units are chosen at the edge (metric or imperial) through :func:`to_display`.
"""

from __future__ import annotations

from typing import Literal

from rundash.errors import ConfigError, invalid_value

TransducerKind = Literal["proximity", "velocity", "acceleration"]
UnitSystem = Literal["metric", "imperial"]

UM_PER_MIL = 25.4  # 1 mil = 0.001 in = 25.4 um (exact, by definition of the inch)
MM_PER_IN = 25.4  # exact
STANDARD_GRAVITY_M_S2 = 9.80665  # exact, CGPM 1901

#: Every unit a machine file may give for a probe, and its factor to the storage unit.
TO_STORAGE: dict[str, tuple[TransducerKind, float]] = {
    "um": ("proximity", 1.0),
    "mil": ("proximity", UM_PER_MIL),
    "mm": ("proximity", 1000.0),
    "mm/s": ("velocity", 1.0),
    "in/s": ("velocity", MM_PER_IN),
    "m/s2": ("acceleration", 1.0),
    "g": ("acceleration", STANDARD_GRAVITY_M_S2),
}

STORAGE_UNIT: dict[str, str] = {"proximity": "um", "velocity": "mm/s", "acceleration": "m/s2"}
IMPERIAL_UNIT: dict[str, str] = {"proximity": "mil", "velocity": "in/s", "acceleration": "g"}
#: How a filtered (nX) amplitude is expressed, per transducer kind.
VECTOR_AMPLITUDE_CONVENTION: dict[str, str] = {
    "proximity": "pp",
    "velocity": "pk",
    "acceleration": "pk",
}
#: How a direct (unfiltered) level, and every level judged against a limit, is expressed:
#: p-p over each revolution for displacement, rms for seismic transducers.
LEVEL_CONVENTION: dict[str, str] = {
    "proximity": "pp",
    "velocity": "rms",
    "acceleration": "rms",
}


def vector_amplitude_factor(kind: str) -> float:
    """Factor from ``|complex nX|`` to the stored nX amplitude of a transducer kind:
    2 for peak-to-peak (proximity), 1 for peak (seismic).

    >>> vector_amplitude_factor("proximity"), vector_amplitude_factor("velocity")
    (2.0, 1.0)
    """
    return 2.0 if VECTOR_AMPLITUDE_CONVENTION[kind] == "pp" else 1.0


#: Factor to volts of the signal units a data file may give its channels.
TO_VOLTS: dict[str, float] = {"V": 1.0, "mV": 1e-3}
#: How data files spell the units rundash knows (lower case, spaces removed).
_SPELLINGS: dict[str, str] = {
    "um": "um", "µm": "um", "μm": "um", "micron": "um", "microns": "um",
    "micrometer": "um", "micrometre": "um", "mil": "mil", "mils": "mil", "mm": "mm",
    "mm/s": "mm/s", "in/s": "in/s", "ips": "in/s", "m/s2": "m/s2", "m/s^2": "m/s2",
    "m/s²": "m/s2", "m/s**2": "m/s2", "m/(s^2)": "m/s2", "g": "g", "v": "V", "mv": "mV",
}


def unit_from_text(text: str) -> str | None:
    """rundash's name of a unit as a data file spells it (``"µm"`` -> ``"um"``,
    ``"m/s^2"`` -> ``"m/s2"``, ``"mV"`` -> ``"mV"``), or None for a unit it does not know.

    >>> unit_from_text(" µm "), unit_from_text("m/s^2"), unit_from_text("counts")
    ('um', 'm/s2', None)
    """
    return _SPELLINGS.get("".join(text.split()).lower())


def storage_factor(unit: str, kind: str) -> float:
    """Factor that turns a value in ``unit`` into the storage unit of ``kind``."""
    if unit not in TO_STORAGE:
        raise ConfigError(invalid_value("units", unit, ", ".join(sorted(TO_STORAGE))))
    unit_kind, factor = TO_STORAGE[unit]
    if unit_kind != kind:
        raise ConfigError(
            invalid_value("units", unit, f"a unit of a {kind} transducer "
                          f"({', '.join(u for u, (k, _) in TO_STORAGE.items() if k == kind)})")
        )
    return factor


def display_unit(kind: str, system: UnitSystem = "metric") -> str:
    """Display unit of a transducer kind in a unit system."""
    return (IMPERIAL_UNIT if system == "imperial" else STORAGE_UNIT)[kind]


def to_display(value, kind: str, system: UnitSystem = "metric"):
    """Convert a value (scalar or array) from the storage unit to the display unit."""
    if system == "metric":
        return value
    unit = IMPERIAL_UNIT[kind]
    return value / TO_STORAGE[unit][1]


def amplitude_label(kind: str, system: UnitSystem = "metric") -> str:
    """Axis label fragment for a filtered amplitude, e.g. ``'um pp'`` or ``'mm/s pk'``."""
    unit = display_unit(kind, system)
    return f"{unit.replace('um', 'µm')} {VECTOR_AMPLITUDE_CONVENTION[kind]}"
