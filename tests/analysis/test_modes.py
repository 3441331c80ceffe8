"""Tests of rundash/analysis/modes.py, partly on the two-disk reference rotor."""

import json
from pathlib import Path

import numpy as np
import pytest

from rundash.analysis.modes import mode_hint
from rundash.errors import AnalysisError

DATA = Path(__file__).resolve().parent.parent / "data" / "rotor-models"


def test_basic_hints():
    assert mode_hint(80.0, 100.0).shape == "cylindrical (translational)"
    assert mode_hint(80.0, 255.0).shape == "conical (pivotal)"
    assert mode_hint(350.0, 10.0).phase_difference_deg == pytest.approx(20.0)
    h = mode_hint(0.0, 90.0)
    assert h.shape == "unclear" and "not a measured mode shape" in h.caution


def test_near_node_and_orientation():
    h = mode_hint(80.0, 100.0, amplitude_a=50.0, amplitude_b=2.0)
    assert h.shape == "unclear" and any("node" in e for e in h.evidence)
    # X probe at 0 deg against a Y probe at 90 deg: angles applied (forward circular orbit)
    h = mode_hint(80.0, 170.0, angle_a_deg=0.0, angle_b_deg=90.0)
    assert h.shape == "cylindrical (translational)"
    assert any("mounting angles applied" in e for e in h.evidence)


def test_two_disk_reference_rotor():
    # two-disk-anisotropic.json (ross 2.3.0): lags at the peaks of the X probes at both
    # bearings. First (split, cylindrical/bow) mode: bearing1_X 77 deg, bearing2_X 105
    # deg; conical pair: 97 deg and 252 deg (README: the conical mode shape changes sign
    # along the shaft; run_modal shape bearing1 +1.0, bearing2 -0.83).
    meta = json.loads((DATA / "two-disk-anisotropic.json").read_text())
    b1 = meta["response_peaks"]["bearing1_X"]["peaks"]
    b2 = meta["response_peaks"]["bearing2_X"]["peaks"]
    first = mode_hint(b1[0]["phase_lag_at_peak_deg"], b2[0]["phase_lag_at_peak_deg"])
    second = mode_hint(b1[1]["phase_lag_at_peak_deg"], b2[1]["phase_lag_at_peak_deg"])
    assert first.shape == "cylindrical (translational)"
    assert second.shape == "conical (pivotal)"
    modal = meta["modal_run_modal"][0]["lateral_modes"]
    assert np.sign(modal[2]["shape_at_stations"]["bearing1"]) != np.sign(modal[2]["shape_at_stations"]["bearing2"])


def test_validation():
    with pytest.raises(AnalysisError, match="Invalid value for 'lag_bearing_a_deg'"):
        mode_hint(float("nan"), 10.0)
    with pytest.raises(AnalysisError, match="Invalid value for 'tolerance_deg'"):
        mode_hint(1.0, 10.0, tolerance_deg=100.0)
