"""The sign-off report: one run's machine and run data, processing, tach repairs,
findings and verdicts with the guidance profile and its sources, the comparison with
other runs if asked, the plots, the caution and a sign-off block.

write_report   write FILE.html (self-contained, opens offline) or FILE.pdf
render         the page as an HTML string ('interactive' or 'static' figures)
load_report_data  what the report shows, read through the storage read functions
"""

from __future__ import annotations

from pathlib import Path
from typing import Sequence

from rundash.errors import InputError
from rundash.report.html import load_report_data, render

__all__ = ["load_report_data", "render", "write_report"]


def write_report(db, run_id: int, output: str | Path, *, compare: Sequence[int] = (),
                 reviewer: str = "", role: str = "", decision: str = "", remarks: str = "",
                 n_boot: int = 100) -> Path:
    """Write the report of ``run_id`` to ``output`` (``.html`` or ``.pdf``); returns it.

    The HTML file inlines plotly.js (interactive plots, no network needed); the PDF is
    the same page with static SVG figures (kaleido), printed by headless Chromium.
    """
    out = Path(output)
    suffix = out.suffix.lower()
    if suffix not in (".html", ".htm", ".pdf"):
        raise InputError(f"Invalid value for '--output': allowed a file name ending in .html "
                         f"or .pdf, got {str(output)!r}")
    if not out.parent.is_dir():
        raise InputError(f"Invalid value for '--output': allowed a file in an existing "
                         f"folder, got {str(output)!r}")
    if suffix == ".pdf":
        from rundash.report.pdf import check_pdf_tools
        check_pdf_tools()  # before the data is loaded: one line, no traceback
    data = load_report_data(db, run_id, compare, n_boot=n_boot)
    kw = dict(reviewer=reviewer, role=role, decision=decision, remarks=remarks)
    if suffix == ".pdf":
        from rundash.report.pdf import html_to_pdf
        return html_to_pdf(render(data, flavour="static", **kw), out)
    out.write_text(render(data, flavour="interactive", **kw), encoding="utf-8")
    return out
