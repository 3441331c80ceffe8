"""Folded page sections (``<details>``) whose content can be large.

Every Dash component on a page slows each of the page's updates in the browser, and each
plotly figure costs the browser 0.1–0.4 s to draw, so a fold of more than
:data:`EAGER_ROWS` table rows (or one holding figures) is sent empty with the page and
built by a callback on the first click of its summary.
"""

from __future__ import annotations

#: A folded table of more rows than this is built when the fold is first opened (a
#: 16-channel run-up had ~150 reference-only limit rows, ~1600 table cells).
EAGER_ROWS = 30
