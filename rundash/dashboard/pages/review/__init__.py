"""Run review: opens on the verdict (criticals, margins found versus required, limit
checks, confidence, the caution), then the plots behind it.

``data`` reads the stored results and draws the figures, ``layout`` builds the page and
its verdict panel (rows from :mod:`rundash.presentation`), ``callbacks`` wires the
controls. Callbacks are thin; tests call the functions of ``data`` and ``layout``
directly.
"""

from __future__ import annotations

import re

from rundash.dashboard.pages.review.callbacks import critical_index_from_click, register_callbacks
from rundash.dashboard.pages.review.data import (
    PHASE_DISPLAYS, UNIT_SYSTEMS, bode_figure, campbell_figure, cascade_figure, load_context,
    operating_of, orbit_figure, orbit_pairs, parse_frequencies, polar_direct_figures,
    speed_figure, vector_figures, vector_traces,
)
from rundash.dashboard.pages.review.layout import (
    CRITICAL_COLUMNS, LIMIT_COLUMNS, evidence_panel, layout, verdict_panel,
)
from rundash.presentation import critical_rows, limit_rows

PATH = "/run/"
TITLE = "Run review"
_ROUTE = re.compile(r"^/run/(\d+)/?$")


def match(pathname: str):
    m = _ROUTE.match(pathname or "")
    return {"run_id": int(m.group(1))} if m else None


__all__ = [
    "PATH", "TITLE", "match", "layout", "register_callbacks", "load_context", "vector_traces",
    "bode_figure", "polar_direct_figures", "vector_figures", "speed_figure", "cascade_figure",
    "campbell_figure", "parse_frequencies", "orbit_pairs", "orbit_figure", "operating_of",
    "verdict_panel", "evidence_panel", "critical_index_from_click", "critical_rows",
    "limit_rows", "CRITICAL_COLUMNS", "LIMIT_COLUMNS", "UNIT_SYSTEMS", "PHASE_DISPLAYS",
]
