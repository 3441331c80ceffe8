"""Print a report page to PDF with headless Chromium's own print-to-PDF.

Why Chromium: kaleido (>= 1), which makes the static figures, already drives the system
Chromium, so printing the same HTML page with it adds no dependency, keeps one layout for
the HTML and the PDF, and gives real text (searchable, extractable) and vector figures.
The browser is ``$BROWSER_PATH`` or ``chromium`` / ``chromium-browser`` /
``google-chrome`` on the PATH. It runs with no network (the page has no remote
resources) and a throw-away profile.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import tempfile
from pathlib import Path

from rundash.errors import ConfigError, InputError

FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--no-first-run", "--disable-quic", "--no-pdf-header-footer",
         "--run-all-compositor-stages-before-draw")
TIMEOUT_S = 120


def find_browser() -> str:
    """Path of the Chromium used for printing (``ConfigError`` when none is found)."""
    env = os.environ.get("BROWSER_PATH")
    if env and Path(env).is_file():
        return env
    for name in ("chromium", "chromium-browser", "google-chrome"):
        p = shutil.which(name)
        if p:
            return p
    raise ConfigError("PDF output needs Chromium: install it (Debian: apt-get install "
                      "chromium) or set BROWSER_PATH, or write an .html report instead")


def check_pdf_tools() -> None:
    """Raise one ``ConfigError`` naming everything the PDF path lacks (the PDF extra,
    kaleido, for the static figures; Chromium for the figures and the printing), so that
    nothing is loaded or drawn before the user hears it."""
    missing = []
    try:
        import kaleido  # noqa: F401
    except ImportError:
        missing.append("the PDF extra (pip install 'rundash[pdf]', which brings kaleido)")
    try:
        find_browser()
    except ConfigError:
        missing.append("Chromium (Debian: apt-get install chromium; or set BROWSER_PATH)")
    if missing:
        raise ConfigError("PDF output needs " + " and ".join(missing)
                          + "; an .html report needs neither")


def html_to_pdf(page: str, out: Path) -> Path:
    """Write ``page`` (a complete HTML document) as the PDF file ``out``."""
    browser = find_browser()
    out = Path(out).resolve()
    with tempfile.TemporaryDirectory(prefix="rundash-report-") as tmp:
        src = Path(tmp) / "report.html"
        src.write_text(page, encoding="utf-8")
        pdf = Path(tmp) / "report.pdf"
        cmd = [browser, *FLAGS, f"--user-data-dir={Path(tmp) / 'profile'}",
               f"--print-to-pdf={pdf}", src.as_uri()]
        try:
            res = subprocess.run(cmd, capture_output=True, text=True, timeout=TIMEOUT_S)
        except subprocess.TimeoutExpired:
            raise InputError(f"Chromium did not print the report within {TIMEOUT_S} s") from None
        if not pdf.is_file() or pdf.stat().st_size == 0:
            last = (res.stderr or "").strip().splitlines()[-1:] or ["no message"]
            raise InputError(f"Chromium could not print the report (exit {res.returncode}): "
                             f"{last[0][:200]}")
        shutil.move(str(pdf), out)
    return out
