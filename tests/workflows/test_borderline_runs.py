"""Heavily damped single-mode runs near the AF 2.5 threshold through the whole pipeline:
WAV files written by scipy.io.wavfile, imported and processed on a real SQLite file.
Verdict borderline or critically damped (pass), never a confident fail.

References: the response is the single-degree-of-freedom unbalance response
e r^2 / (1 - r^2 + 2 j zeta r), synthesised quasi-steadily along a slow run-up
(W. T. Thomson and M. D. Dahleh, Theory of Vibration with Applications, 5th ed., 1998,
sec. 3.3; at 60 rpm/s through a mode this broad the sweep's own distortion, F. M. Lewis,
Trans. ASME 1932, is far below the noise); its exact half-power AF (API 684 definition:
N_c / (N_2 - N_1)) from the quartic of tests/analysis/closed_form.py: 2.40 at zeta 0.18,
2.07 at 0.20, both below 2.5, so critically damped by the API 617-style rule (from memory,
DEVELOPERS.md, Reference values). The critical sits about 7 % above N_mc, short of the 10 %
base margin: a confident AF above 2.5 would fail it, which is what must not happen.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.io import wavfile

from rundash.ingest.importer import import_run
from rundash.ingest.machine_file import parse_machine_description
from rundash.presentation import critical_rows
from rundash.storage.engine import open_database
from rundash.workflows.pipeline import ProcessingParams, process_run
from tests.analysis.closed_form import sdof_half_power_af, sdof_unbalance
from tests.analysis.test_borderline import FN, N_MC, N_MIN, _n2
from tests.synth import linear_sweep, tach_waveform

FS = 2560.0
RATE_RPM_S = 60.0
MACHINE = f"""
[machine]
name = "Damped rig"
kind = "compressor"
profile = "api617"
rated_speed_rpm = {N_MC:.0f}
min_operating_speed_rpm = {N_MIN:.0f}
max_continuous_speed_rpm = {N_MC:.0f}

[tach]
column = "ch1"

[[probes]]
name = "R-X"
column = "ch2"
kind = "proximity"
units = "um"
sensitivity_mv_per_unit = 7.874

[data]
full_scale_v = 10.0
"""


def _write_run(path, zeta: float, end_rpm: float, seed: int) -> None:
    sweep = linear_sweep(300.0, RATE_RPM_S, (end_rpm - 300.0) / RATE_RPM_S)
    t = np.arange(int(sweep.duration_s * FS)) / FS
    theta = sweep.theta(t)
    c = 20.0 * sdof_unbalance(sweep.rpm(t), FN, zeta)  # um pp, 20 um pp well above
    rng = np.random.default_rng(seed)
    x_um = 0.5 * np.abs(c) * np.cos(2 * np.pi * theta + np.angle(c)) \
        + 0.3 * rng.standard_normal(t.size)
    volts = np.vstack([tach_waveform(theta, ramp_rev=0.02), x_um * 7.874e-3])
    wavfile.write(path, int(FS), (volts.T / 10.0).astype(np.float32))


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("borderline")
    db = open_database(str(tmp / "runs.sqlite"), create=True)
    desc = parse_machine_description(MACHINE, "m.toml")
    out = {}
    for seed, zeta in enumerate((0.18, 0.20)):
        for truncated in (False, True):
            end = 1.02 * _n2(zeta) if truncated else 3.0 * FN
            path = tmp / f"zeta{zeta:.2f}-{'truncated' if truncated else 'full'}.wav"
            _write_run(path, zeta, end, seed)
            res = import_run(db, path, desc, description_text=MACHINE, kind="run-up")
            out[(zeta, truncated)] = process_run(
                db, res.run_id, params=ProcessingParams(slow_roll_rpm=(300.0, 400.0))).findings
    yield out
    db.dispose()


@pytest.mark.parametrize("zeta", [0.18, 0.20])
@pytest.mark.parametrize("truncated", [False, True])
def test_never_a_confident_fail(runs, zeta, truncated):
    assert sdof_half_power_af(zeta) < 2.5  # 2.40 and 2.07: critically damped by the rule
    f = runs[(zeta, truncated)]
    crits = [c for c in f["criticals"] if c["counts_for_run_verdict"]]
    assert len(crits) == 1, [(c["speed_rpm"], c["margin_verdict"]) for c in crits]
    (c,) = crits
    # the peak of the closed form, FN / sqrt(1 - 2 zeta^2), within 2 % (the binned,
    # noisy response of a broad mode; issue 12 measured 0.1-0.5 % on sharp ones)
    assert c["speed_rpm"] == pytest.approx(FN / np.sqrt(1 - 2 * zeta ** 2), rel=0.02)
    if not truncated:  # the half-power AF (API 684) against the closed form's exact one,
        # within 3 % (issue 12 measured "AF within a few %" on clean quasi-steady data)
        assert c["af_half_power"] == pytest.approx(sdof_half_power_af(zeta), rel=0.03)
    assert c["margin_verdict"] in ("borderline", "pass"), c["margin_reason"]
    if c["margin_verdict"] == "pass":
        assert "critically damped" in c["margin_reason"]
    else:  # both readings said, with the verdict each gives
        assert "pass (" in c["margin_reason"] and "fail (" in c["margin_reason"]
    assert f["run_verdict"] in ("borderline", "pass")
    row = next(r for r in critical_rows(f) if r["probe"] == "R-X")
    assert "fail" not in row["verdict"].lower()


def test_truncated_zeta_018_says_the_edge_or_the_fit_governs(runs):
    # data ending 2 % past N2: the half-power points are not well inside the data; the
    # verdict then says so, unless the run's modal fit governs (its AF from the damping)
    (c,) = [c for c in runs[(0.18, True)]["criticals"] if c["counts_for_run_verdict"]]
    assert ("of the data's last speed" in c["margin_reason"]
            or c.get("governing") == "sweep-free"), c["margin_reason"]
