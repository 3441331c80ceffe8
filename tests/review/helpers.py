"""A run with findings of known values for the review tests (an invented scenario: round
numbers on the test rig of tests/conftest.py), stored without waveforms so the tests stay
fast; processing is simulated by writing the processing row the pipeline writes."""

from __future__ import annotations

from datetime import datetime, timezone

from rundash import CAUTION
from rundash.ingest.machine_file import parse_machine_description
from rundash.storage import queries as q
from tests.conftest import EXAMPLE_MACHINE

N_MIN, N_MC = 5000.0, 6300.0  # the rig's operating range (EXAMPLE_MACHINE)


def critical(probe: str, speed: float, af: float | None, *, verdict: str,
             classification: str = "confirmed", direction: str = "run-up") -> dict:
    return {"probe": probe, "direction": direction, "speed_rpm": speed, "af_governing": af,
            "af_method": "half-power", "classification": classification,
            "margin_verdict": verdict, "separation_margin_pct": None,
            "required_margin_pct": None, "side": "below", "damping_ratio_fit": None,
            "counts_for_run_verdict": True, "margin_reason": "automatic (test)"}


def findings(run_id: int) -> dict:
    """NDE-X: 3500 rpm, AF 5, below the range (margin 30 %, passes); NDE-Y: 5600 rpm,
    AF 4, inside the range (fails). Run verdict fail."""
    return {"schema": "rundash.findings/1",
            "run": {"id": run_id, "machine": "Test rig T-1"},
            "machine": {"rated_speed_rpm": 6000.0, "min_operating_speed_rpm": N_MIN,
                        "max_continuous_speed_rpm": N_MC, "trip_speed_rpm": 6900.0},
            "profile": {"name": "api617"},
            "processing": {"speed_range_rpm": [200.0, 6300.0]},
            "probes": [{"name": "NDE-X"}, {"name": "NDE-Y"}, {"name": "NDE-V"}],
            "criticals": [critical("NDE-X", 3500.0, 5.0, verdict="pass"),
                          critical("NDE-Y", 5600.0, 4.0, verdict="fail")],
            "limits": [], "warnings": [], "run_verdict": "fail", "caution": CAUTION}


def make_run(db, *, label: str = "review test run") -> int:
    """A complete run of the test rig with a processing row and :func:`findings`."""
    desc = parse_machine_description(EXAMPLE_MACHINE, "test machine")
    with db.write() as conn:
        mid, _ = q.upsert_machine(conn, desc)
        run_id = q.create_run(conn, machine_id=mid, kind="run-up", label=label, cycle="c1",
                              notes="", started_at=datetime(2026, 5, 1, 6, tzinfo=timezone.utc),
                              source_name=f"{label}.wav", source_sha256=label.ljust(64, "0")[:64],
                              sample_rate_hz=2048.0, description_toml=EXAMPLE_MACHINE,
                              state="complete")
    process(db, run_id)
    return run_id


def process(db, run_id: int, fnd: dict | None = None) -> None:
    """Replace the run's results by a new processing (as ``rundash process`` does)."""
    with db.write() as conn:
        q.clear_results(conn, run_id)
        q.save_processing(conn, run_id, version="test", params={}, slow_roll_rpm=None,
                          tach_report={}, segments=[], warnings=[])
        q.save_findings_json(conn, run_id, fnd or findings(run_id))
