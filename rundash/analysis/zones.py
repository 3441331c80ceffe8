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

from types import MappingProxyType

_ISO_10816_3 = dict(document="ISO 10816-3", edition="ISO 10816-3:2009",
                    clause="Annex A, Table A.1 and A.2", confidence="from memory")

SHAFT_DISPLACEMENT = MappingProxyType(dict(
    document="ISO 7919-3 (carried into ISO 20816-3)", edition="ISO 7919-3:2009",
    clause="Annex A, zone boundaries for relative shaft displacement",
    confidence="from memory", ab=4800.0, bc=9000.0, cd=13200.0))

BEARING_VELOCITY = tuple(MappingProxyType(dict(_ISO_10816_3, group=g, support=s, ab=ab, bc=bc,
                                                cd=cd))
                         for g, s, ab, bc, cd in (("group1", "rigid", 2.3, 4.5, 7.1),
                                                  ("group1", "flexible", 3.5, 7.1, 11.0),
                                                  ("group2", "rigid", 1.4, 2.8, 4.5),
                                                  ("group2", "flexible", 2.3, 4.5, 7.1)))


def cite(table) -> str:
    """'document, edition, clause (confidence)' of a zone table."""
    return f"{table['document']}, {table['edition']}, {table['clause']} ({table['confidence']})"
