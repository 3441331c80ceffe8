"""Table downloads of the review and compare pages: the same files `rundash export` and
`rundash compare --format` write, byte for byte (demo database, build_demo).

The browser test clicks the real buttons in headless Chromium and reads the downloaded
files from dash_duo's download folder. Screenshots go to artifacts/ (ignored by git).
"""

from __future__ import annotations

import base64
import os

import pytest

from rundash import CAUTION
from rundash.cli import main
from rundash.dashboard import exports, ids
from rundash.dashboard.app import create_app
from rundash.dashboard.pages.compare import N_BOOT
from tests.dashboard.test_browser import _click, _severe, _shot
from tests.dashboard.test_compare_page import demo_full, ups  # noqa: F401  (fixtures)


def _cli_file(db, tmp_path, *args) -> bytes:
    out = tmp_path / "cli.out"
    assert main([*args, "--db", db.url, "-o", str(out)]) == 0
    return out.read_bytes()


class TestDirect:
    @pytest.mark.parametrize("what, fmt", [("vectors", "csv"), ("findings", "csv"),
                                           ("limits", "csv"), ("speed", "parquet")])
    def test_review_download_is_the_cli_file(self, demo_full, ups, tmp_path, what, fmt):  # noqa: F811
        db, _ = demo_full
        data, status = exports.run_download(db, ups[1], what, fmt)
        assert data["filename"] == f"rundash-run-{ups[1]}-{what}.{fmt}"
        assert "ready" in status.children
        got = base64.b64decode(data["content"])
        assert got == _cli_file(db, tmp_path, "export", str(ups[1]), "--what", what,
                                "--format", fmt)

    def test_compare_download_is_the_cli_file(self, demo_full, ups, tmp_path):  # noqa: F811
        db, _ = demo_full
        data, _ = exports.compare_download(db, list(reversed(ups)), "csv")
        assert data["filename"] == f"rundash-compare-{ups[0]}-{ups[1]}.csv"
        got = base64.b64decode(data["content"])
        assert got == _cli_file(db, tmp_path, "compare", str(ups[0]), str(ups[1]), "--boot",
                                str(N_BOOT), "--format", "csv")
        assert CAUTION in got.decode("utf-8")

    def test_errors_are_one_visible_line(self, demo_full):  # noqa: F811
        db, _ = demo_full
        data, status = exports.run_download(db, 9999, "vectors", "csv")
        assert data is None and status.role == "alert" and "no run with id 9999" in status.children
        data, status = exports.compare_download(db, [1], "csv")
        assert data is None and "two or more" in status.children
        assert exports.run_download(db, 1, None, "csv") == (None, None)


@pytest.mark.browser
def test_downloads_land_the_cli_files(dash_duo, demo_full, ups, tmp_path):  # noqa: F811
    from dash.testing.wait import until

    db, _ = demo_full
    dash_duo.start_server(create_app(db))
    dash_duo.driver.get(dash_duo.server_url + f"/run/{ups[1]}")
    dash_duo.wait_for_element(f"#{ids.EXPORT_BUTTON}", timeout=15)
    _click(dash_duo, f"#{ids.EXPORT_BUTTON}")  # vectors as CSV: the defaults
    dash_duo.wait_for_contains_text(f"#{ids.EXPORT_STATUS}", "ready", timeout=30)
    path = os.path.join(dash_duo.download_path, f"rundash-run-{ups[1]}-vectors.csv")
    want = _cli_file(db, tmp_path, "export", str(ups[1]), "--what", "vectors",
                     "--format", "csv")
    until(lambda: os.path.isfile(path) and os.path.getsize(path) == len(want), timeout=30)
    with open(path, "rb") as fh:
        assert fh.read() == want
    _shot(dash_duo, "review-export")

    dash_duo.driver.get(dash_duo.server_url + f"/compare/{ups[0]},{ups[1]}")
    dash_duo.wait_for_contains_text(f"#{ids.COMPARE_STATUS}", "Compared 2 runs", timeout=30)
    _click(dash_duo, f"#{ids.COMPARE_EXPORT_BUTTON}")
    dash_duo.wait_for_contains_text(f"#{ids.COMPARE_EXPORT_STATUS}", "ready", timeout=30)
    path = os.path.join(dash_duo.download_path, f"rundash-compare-{ups[0]}-{ups[1]}.csv")
    want = _cli_file(db, tmp_path, "compare", str(ups[0]), str(ups[1]), "--boot", str(N_BOOT),
                     "--format", "csv")
    until(lambda: os.path.isfile(path) and os.path.getsize(path) == len(want), timeout=30)
    with open(path, "rb") as fh:
        assert fh.read() == want
    _shot(dash_duo, "compare-export")
    assert _severe(dash_duo) == []
