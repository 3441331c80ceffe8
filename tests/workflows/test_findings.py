"""Findings of runs with nothing to judge, and what the vectors rest on (rundash.workflows.findings
through the real pipeline on small WAVs written by scipy.io.wavfile)."""

from __future__ import annotations

import numpy as np
from scipy.io import wavfile

from rundash.ingest.importer import import_run
from rundash.ingest.machine_file import parse_machine_description
from rundash.workflows.pipeline import process_run
from tests.synth import corrupt_events, linear_sweep, probe_signal, tach_waveform
from tests.workflows.test_pipeline import FS, MACHINE


def _run(db, tmp_path, name, theta, tach=None):
    x_um = probe_signal(theta, 20.0, 30.0)
    tach = tach_waveform(theta, ramp_rev=0.02) if tach is None else tach
    volts = np.vstack([tach, x_um * 7.874e-3, 0.01 * np.cos(2 * np.pi * theta)])
    path = tmp_path / name
    wavfile.write(path, int(FS), (volts.T / 10.0).astype(np.float32))
    desc = parse_machine_description(MACHINE, "m.toml")
    res = import_run(db, path, desc, description_text=MACHINE)
    return process_run(db, res.run_id).findings


class TestNothingToJudge:
    def test_constant_speed_run_is_not_judged_never_a_silent_pass(self, db, tmp_path):
        t = np.arange(int(12 * FS)) / FS
        f = _run(db, tmp_path, "steady.wav", 3000.0 / 60.0 * t)  # 3000 rpm throughout
        assert f["criticals"] == []
        assert f["run_verdict"] == "not judged"
        assert any("no run-up or coast-down" in w for w in f["warnings"])
        assert f["caution"]


class TestWhatTheVectorsRestOn:
    def test_tach_repairs_are_in_the_findings_warnings(self, db, tmp_path):
        sweep = linear_sweep(600.0, 200.0, 12.0)
        t = np.arange(int(sweep.duration_s * FS)) / FS
        theta = sweep.theta(t)
        # drop 3 % of the once-per-rev pulses from the tach waveform: flatten them
        tach = tach_waveform(theta, ramp_rev=0.02)
        rev = np.floor(theta + 0.5).astype(int)
        events = sweep.rev_times()
        kept = corrupt_events(events, np.random.default_rng(5), missing=0.03)
        dropped = sorted(set(np.round(events, 9)) - set(np.round(kept, 9)))
        dropped_revs = {int(round(sweep.theta(np.array(d)).item())) for d in dropped}
        tach[np.isin(rev, list(dropped_revs))] = 0.0
        f = _run(db, tmp_path, "repaired.wav", theta, tach)
        assert any("TachQualityWarning" in w for w in f["warnings"])
