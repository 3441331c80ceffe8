"""Wording that cannot mislead: a split critical said once per pair, standing notes apart
from warnings, the speed a top-speed check uses, units spelled for the screen."""

from __future__ import annotations

from rundash import presentation as pr


def _split_findings():
    def b(speed, axis, other, pct):
        return {"bearing": "DE", "direction": "coast-down", "speed_rpm": speed,
                "agreement": "one side only",
                "note": f"critical at {speed:.0f} rpm seen by {axis} only; possible split "
                        f"critical with the other probe's {other:.0f} rpm ({pct:+.1f} %), "
                        "e.g. anisotropic supports"}
    return {"bearings": [b(3344.0, "X", 3586.0, 7.2), b(3586.0, "Y", 3344.0, 7.2),
                         {"bearing": "NDE", "direction": "coast-down", "speed_rpm": 3400.0,
                          "agreement": "agree", "note": None}]}


def test_split_pair_said_once():
    lines = pr.bearing_lines(_split_findings())
    assert lines == ["DE coast-down: possible split critical, 3,344 rpm seen by X only and "
                     "3,586 rpm seen by Y only, +7.2 % apart (e.g. anisotropic supports)",
                     "NDE coast-down: 3,400 rpm, agree"]


def test_standing_notes_apart_from_warnings():
    warn, notes = pr.split_standing([
        "values marked 'reference only' are shown for orientation: each rule is judged only "
        "inside its scope", "tach quantised: edges on the sample grid"])
    assert warn == ["tach quantised: edges on the sample grid"]
    assert len(notes) == 1 and notes[0].startswith("values marked")


def test_top_speed_check_says_which_speed_and_why():
    f = {"machine": {"max_continuous_speed_rpm": 5460.0},
         "limits": [{"probe": "P-X", "direction": "coast-down", "measure": "direct",
                     "where": "top speed", "band_rpm": [5430.0, 5485.0], "speed_rpm": 5484.0,
                     "value": 34.9, "units": "um pp", "limit": 25.4, "verdict": "exceeds",
                     "basis": "test"},
                    {"probe": "P-X", "direction": "coast-down", "measure": "direct",
                     "where": "above N_mc", "band_rpm": [5487.3, 6002.0], "speed_rpm": 6000.0,
                     "value": 40.0, "units": "um pp", "limit": 25.4,
                     "verdict": "reference only", "basis": "test"}]}
    note = pr.top_speed_note(f)
    assert "reached 6,002 rpm" in note and "use 5,485 rpm" in note
    assert "N_mc 5,460 rpm" in note and "within the operating range" in note
    reason = pr.verdict_reasons(f)[0]
    assert reason.endswith(f"Speed used: {note}.")
    # a run that stayed within N_mc needs no such note
    f["limits"] = f["limits"][:1]
    assert pr.top_speed_note(f) is None and "Speed used" not in pr.verdict_reasons(f)[0]


def test_units_spelled_for_the_screen():
    assert pr.display_text("A-X: 25.6 um pp above 25.4 um pp") == \
        "A-X: 25.6 µm pp above 25.4 µm pp"
    assert pr.display_text("drum sum um/s") == "drum sum µm/s"
