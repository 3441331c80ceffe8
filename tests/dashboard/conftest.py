"""Fixtures of the dashboard tests: a small processed database and the browser options.

The database holds one demo run (imported from the bundled sample runs and processed),
with a findings dict written by the test so that verdict, markers and evidence have known
values whatever the findings code of the day produces.
"""

from __future__ import annotations

import shutil
from pathlib import Path
from types import SimpleNamespace

import pytest

from rundash import CAUTION
from rundash.storage.engine import open_database

BROWSER_FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
                 "--disable-background-networking", "--disable-component-update",
                 "--disable-sync", "--no-first-run", "--disable-quic", "--window-size=1400,1000")
ARTIFACTS = Path(__file__).resolve().parents[2] / "artifacts"


def pytest_configure(config):
    # dash's browser fixture reads --headless; these tests never open a visible window
    if hasattr(config.option, "headless"):
        config.option.headless = True


def pytest_setup_options():
    """Chrome options for dash's ``dash_duo`` (the hook returns the Options object)."""
    from selenium.webdriver.chrome.options import Options

    options = Options()
    for flag in BROWSER_FLAGS:
        options.add_argument(flag)
    chromium = shutil.which("chromium")
    if chromium:
        options.binary_location = chromium
    return options


def make_findings(run_id: int, machine: str) -> dict:
    """A findings dict of schema rundash.findings/1 with round numbers (invented)."""
    def crit(probe, speed, direction="run-up", n1=None, n2=None, af=5.0, sm=None, req=12.143):
        return {"probe": probe, "bearing": probe.split("-")[1], "axis": probe[-1],
                "direction": direction, "speed_rpm": speed, "speed_basis": "amplitude peak",
                "peak_speed_rpm": speed, "quadrature_speed_rpm": speed - 10.0,
                "band_rpm": [speed - 400.0, speed + 400.0], "peak_amplitude": 50.8,
                "amplitude_units": "um pp", "phase_change_deg": 160.0, "lag_at_peak_deg": 95.0,
                "af_half_power": af, "n1_rpm": n1 or speed * 0.9, "n2_rpm": n2 or speed * 1.1,
                "af_phase": af and af * 1.1, "af_fit": af and af * 0.95, "damping_ratio_fit": 0.1,
                "af_governing": af, "af_method": "half-power", "classification": "critical",
                "confidence": "high", "evidence": ["phase lag rises 160 deg through the peak",
                                                   "both half-power points inside the data"],
                "mode_hint": None, "sweep_rate_rpm_s": 140.0, "sweep_note": None,
                "separation_margin_pct": sm if sm is not None else 100 * (4400 - speed) / 4400,
                "required_margin_pct": req, "side": "below", "reference_speed_rpm": 4400.0,
                "margin_verdict": "pass",
                "margin_reason": None, "profile": "api617"}

    def lim(probe, where, speed, value, limit, zone, verdict, basis):
        return {"probe": probe, "direction": "run-up", "measure": "direct", "where": where,
                "speed_rpm": speed, "value": value, "units": "um pp", "limit": limit,
                "zone": zone, "verdict": verdict, "basis": basis,
                "source": "API 617 / ISO 7919-3 (from memory)"}

    return {
        "schema": "rundash.findings/1",
        "run": {"id": run_id, "machine": machine, "label": "", "cycle": "", "kind": "run-up",
                "started_at": None},
        "machine": {"rated_speed_rpm": 5200.0, "min_operating_speed_rpm": 4400.0,
                    "max_continuous_speed_rpm": 5460.0, "trip_speed_rpm": 6000.0},
        "profile": {"name": "api617", "title": "Compressors (test)", "needs_confirmation": False,
                    "rules": []},
        "criticals": [crit("K410-DE-X", 3500.0), crit("K410-DE-Y", 3520.0),
                      crit("K410-NDE-X", 3480.0, af=None, sm=20.9, req=None)],
        "bearings": [{"bearing": "DE", "direction": "run-up", "speed_rpm": 3510.0,
                      "agreement": "agree", "note": None}],
        "limits": [
            lim("K410-DE-X", "critical band", 3500.0, 95.0, 155.0, "B", "reference only",
                "zone B for reference (test)"),
            lim("K410-DE-X", "top speed", 5460.0, 12.7, 25.4, "A", "within", "API 617 style"),
            lim("K410-DE-Y", "critical band", 3520.0, 90.0, 155.0, "B", "reference only",
                "zone B for reference (test)"),
            lim("K410-DE-Y", "top speed", 5460.0, 30.48, 25.4, None, "exceeds",
                "API 617 style")],
        "rising_at_top": [{"probe": "K410-NDE-Y", "direction": "run-up", "from_rpm": 5000.0,
                           "to_rpm": 5460.0, "rise_pct": 40.0, "lag_change_deg": -8.0,
                           "note": "test note: the 1X amplitude still rises at the top"}],
        "directions": [{"probe": "K410-DE-X", "run_up_speed_rpm": 3500.0,
                        "coast_down_speed_rpm": 3430.0, "speed_difference_pct": -2.0,
                        "af_difference": 0.4, "agreement": "agree", "note": None}],
        "warnings": ["test warning: sweep near the limit",
                     "K410-NDE-Y run-up: test note: the 1X amplitude still rises at the top"],
        "run_verdict": "fail",
        "caution": CAUTION,
    }


@pytest.fixture(scope="session")
def demo_db(tmp_path_factory):
    """A database with the 2023 run-up of the demo, processed, with known findings."""
    from rundash.workflows.demo import sample_runs_dir
    from rundash.ingest.importer import import_run
    from rundash.ingest.machine_file import load_machine_description
    from rundash.workflows.pipeline import process_run
    from rundash.storage import queries as q

    folder = sample_runs_dir()
    desc, text = load_machine_description(folder / "tarnwick-k410.toml")
    db = open_database(str(tmp_path_factory.mktemp("dash") / "demo.sqlite"), create=True)
    res = import_run(db, folder / "k410_2023_up.wav", desc, description_text=text,
                     label="First start (test)", cycle="2023 overhaul", kind="run-up")
    process_run(db, res.run_id)
    with db.write() as conn:
        q.save_findings_json(conn, res.run_id, make_findings(res.run_id, desc.machine.name))
    yield SimpleNamespace(db=db, run_id=res.run_id, desc_text=text, folder=folder)
    db.dispose()
