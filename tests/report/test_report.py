"""The sign-off report on the demo machine: the PDF's text (read back with pypdf, an
independent PDF library) holds the findings and the caution; the HTML opens in headless
Chromium with no remote resources and draws every plot.

The demo run's critical speeds come from the stored findings (checked against the
scenario's model in tests/test_demo_findings.py); here the report must carry them.
"""

from __future__ import annotations

import html
import os
import re
import shutil
import subprocess
import sys
import unicodedata
from pathlib import Path

import pytest

from rundash import CAUTION
from rundash.cli import main
from rundash.workflows.demo import build_demo
from rundash.report import load_report_data, write_report
from rundash.report.html import build_figures
from rundash.storage import queries as q
from rundash.storage.engine import open_database

ROOT = Path(__file__).resolve().parents[2]
BROWSER_FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
                 "--disable-background-networking", "--disable-component-update",
                 "--disable-sync", "--no-first-run", "--disable-quic", "--window-size=1200,900")


def _words(text: str) -> str:
    # PDF text comes with ligatures (fi) and line breaks where the page wrapped
    return re.sub(r"\s+", " ", unicodedata.normalize("NFKC", text))


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    folder = tmp_path_factory.mktemp("report")
    db = open_database(str(folder / "demo.sqlite"), create=True)
    ids = build_demo(db)
    with db.read() as conn:
        by_file = {q.get_run(conn, i).source_name: i for i in ids}
        findings = q.load_processing(conn, by_file["k410_2025_up.wav"]).findings
    yield db, folder, by_file, findings
    db.dispose()


@pytest.fixture(scope="module")
def pdf_text(demo):
    import pypdf

    db, folder, by_file, _ = demo
    out = write_report(db, by_file["k410_2025_up.wav"], folder / "r.pdf",
                       compare=[by_file["k410_2023_up.wav"]], reviewer="R. Okafor",
                       role="machinery engineer",
                       decision="accepted with remarks", remarks="audit the second critical",
                       n_boot=10)
    reader = pypdf.PdfReader(str(out))
    return len(reader.pages), _words(" ".join(p.extract_text() for p in reader.pages))


class TestPdf:
    def test_holds_the_findings(self, pdf_text, demo):
        _, text = pdf_text
        findings = demo[3]
        assert "Critical speeds and separation margins" in text
        for c in findings["criticals"]:
            assert f"{c['speed_rpm']:,.0f}" in text and c["probe"] in text
            assert f"{c['required_margin_pct']:.1f} %" in text
        assert f"Run verdict: {findings['run_verdict'].upper()}" in text
        for r in findings["profile"]["rules"]:
            assert r["document"] in text
        assert "Once-per-rev reference (tach) and its repairs" in text
        # the profile's confidence said once, at the top (the demo machine uses api617,
        # whose rules are from memory)
        note = findings["profile"]["confidence_note"]
        assert note and _words(note) in text and text.count(_words(note)) == 1
        assert text.index(_words(note)) < text.index("Critical speeds and separation margins")

    def test_holds_the_caution_and_the_sign_off(self, pdf_text):
        _, text = pdf_text
        assert _words(CAUTION) in text
        assert "Sign-off" in text and "R. Okafor" in text and "audit the second critical" in text
        assert "Role machinery engineer" in text

    def test_holds_the_comparison(self, pdf_text):
        _, text = pdf_text
        assert "Comparison with other runs" in text and "moved down" in text
        assert "significant change" in text

    def test_pages_are_numbered(self, pdf_text):
        n, text = pdf_text
        assert n >= 3 and f"page {n} of {n}" in text


class TestHtml:
    def test_standing_notes_apart_from_the_warnings(self, demo):
        """As on the review page (presentation.split_standing): the notes that hold for
        every run are listed under Notes, not among the run's warnings."""
        from rundash import presentation as pr

        db, folder, by_file, findings = demo
        warn, standing = pr.split_standing(findings["warnings"])
        assert standing  # the demo run has reference-only values, so the note is there
        page = write_report(db, by_file["k410_2025_up.wav"], folder / "notes.html"
                            ).read_text(encoding="utf-8")
        notes = page[page.index("<h3>Notes</h3>"):]
        notes = notes[:notes.index("</ul>")]
        for w in standing:
            assert html.escape(w) in notes
        if "<h3>Warnings</h3>" in page:
            block = page[page.index("<h3>Warnings</h3>"):]
            block = block[:block.index("</ul>")]
            assert not any(html.escape(w) in block for w in standing)
            assert all(html.escape(w) in block for w in warn)

    @pytest.mark.browser
    def test_self_contained_and_drawn_in_chromium(self, demo):
        from selenium import webdriver
        from selenium.webdriver.chrome.options import Options
        from selenium.webdriver.chrome.service import Service

        db, folder, by_file, _ = demo
        rid = by_file["k410_2025_up.wav"]
        out = write_report(db, rid, folder / "r.html")
        page = out.read_text(encoding="utf-8")
        # nothing to fetch: no remote script, style or image outside the inlined plotly.js
        # (whose code holds link strings of its own)
        tags = re.sub(r"<script[^>]*>.*?</script>", "<script></script>", page, flags=re.S)
        assert not re.search(r"""(src|href)\s*=\s*["']https?:""", tags)
        assert html.escape(CAUTION) in page
        options = Options()
        for flag in BROWSER_FLAGS:
            options.add_argument(flag)
        options.binary_location = shutil.which("chromium") or "/usr/bin/chromium"
        driver = webdriver.Chrome(service=Service(shutil.which("chromedriver")),
                                  options=options)
        try:
            driver.get(out.as_uri())
            n = driver.execute_script(
                "return document.querySelectorAll('.plot-container .main-svg').length")
            drawn = driver.execute_script(
                "return document.querySelectorAll('.plot-container').length")
            fetched = driver.execute_script(
                "return performance.getEntriesByType('resource').map(e => e.name)")
            lines = driver.execute_script("return document.querySelectorAll("
                                          "'.plot-container .scatterlayer path.js-line,"
                                          " .plot-container .scatterlayer path.js-fill').length")
        finally:
            driver.quit()
        expected = len(build_figures(load_report_data(db, rid)))
        assert drawn == expected and n >= expected and lines > 0
        assert not [u for u in fetched if u.startswith(("http:", "https:"))]

    def test_cli(self, demo, capsys):
        db, folder, by_file, _ = demo
        path = folder / "cli.html"
        assert main(["report", str(by_file["k410_2023_up.wav"]), "-o", str(path), "--db",
                     str(db.engine.url.database)]) == 0
        assert path.is_file() and capsys.readouterr().out.strip() == str(path)

    @pytest.mark.parametrize("name, words", [("r.txt", "ending in .html or .pdf"),
                                             ("missing/r.html", "existing folder")])
    def test_bad_output(self, demo, capsys, name, words):
        db, folder, by_file, _ = demo
        assert main(["report", "1", "-o", str(folder / name), "--db",
                     str(db.engine.url.database)]) == 1
        err = capsys.readouterr().err.strip()
        assert words in err and len(err.splitlines()) == 1


class TestPdfToolsMissing:
    """The PDF path says in one line what is missing (no traceback): a real ``rundash
    report`` process with kaleido hidden from its imports or Chromium off its PATH."""

    def _run(self, demo, tmp_path, *, hide_kaleido: bool, path: str | None):
        db, _, by_file, _ = demo
        env = dict(os.environ)
        env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
        env.pop("BROWSER_PATH", None)
        if path is not None:
            env["PATH"] = path
        hide = "sys.modules['kaleido'] = None; " if hide_kaleido else ""
        out = tmp_path / "r.pdf"
        res = subprocess.run(
            [sys.executable, "-c", f"import sys; {hide}from rundash.cli import main; "
             "sys.exit(main())", "report", str(by_file["k410_2025_up.wav"]), "-o", str(out),
             "--db", str(db.engine.url.database)],
            capture_output=True, text=True, env=env, timeout=120)
        return res, out

    def test_without_the_pdf_extra(self, demo, tmp_path):
        res, out = self._run(demo, tmp_path, hide_kaleido=True, path=None)
        assert res.returncode == 1 and not out.exists()
        lines = res.stderr.strip().splitlines()
        assert len(lines) == 1 and "Traceback" not in res.stderr, res.stderr
        assert lines[0].startswith("rundash report: error: PDF output needs the PDF extra")
        assert "rundash[pdf]" in lines[0] and "Chromium" not in lines[0]

    def test_without_chromium(self, demo, tmp_path):
        empty = tmp_path / "bin"
        empty.mkdir()
        res, out = self._run(demo, tmp_path, hide_kaleido=False, path=str(empty))
        assert res.returncode == 1 and not out.exists()
        lines = res.stderr.strip().splitlines()
        assert len(lines) == 1 and "Traceback" not in res.stderr, res.stderr
        assert "PDF output needs Chromium" in lines[0] and "apt-get install chromium" in lines[0]

    def test_without_both(self, demo, tmp_path):
        empty = tmp_path / "bin"
        empty.mkdir()
        res, _ = self._run(demo, tmp_path, hide_kaleido=True, path=str(empty))
        lines = res.stderr.strip().splitlines()
        assert len(lines) == 1 and "the PDF extra" in lines[0] and "and Chromium" in lines[0]
