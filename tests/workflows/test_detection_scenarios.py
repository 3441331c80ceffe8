"""Nothing reported that is not there, and trustworthy inputs to the verdict: whole runs
written as WAV files by scipy.io.wavfile, imported and processed into a real SQLite file.

Each probe signal is the 1X of a single-degree-of-freedom rotor under unbalance: the
quasi-steady closed form e r^2 / (1 - r^2 + 2 j zeta r) at the instantaneous speed
(W. T. Thomson and M. D. Dahleh, Theory of Vibration with Applications, 5th ed., 1998,
sec. 3.3) for slow sweeps, the transient solution by scipy.signal.lsim for the fast one;
plus a constant runout vector and white noise. The Y probe sees the same motion 90 deg
later. Speed histories are piecewise linear (tests/synth.py: piecewise_sweep).
"""

from __future__ import annotations

import re

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal as sg
from scipy.io import wavfile

from rundash.dsp.slowroll import auto_slow_roll_window
from rundash.ingest.importer import import_run
from rundash.ingest.machine_file import parse_machine_description
from rundash.storage import queries as q
from rundash.workflows.pipeline import process_run
from tests.synth import notch_tach, piecewise_sweep, tach_waveform

# storage is involved: on SQLite and PostgreSQL (tests/conftest.py)
pytestmark = pytest.mark.both_databases

SENS_V_PER_UM = 7.874e-3

def _machine(name, *, nmin, nmc, kind="compressor", edge="rising", probes, extra=""):
    """Machine description text; ``probes`` = (name, column, kind, units, sensitivity,
    bearing, axis, angle) per probe."""
    units_of = {"proximity": "um", "velocity": "mm/s"}
    tables = "".join(
        f'\n[[probes]]\nname = "{n}"\ncolumn = "{c}"\nkind = "{k}"\nunits = "{units_of[k]}"\n'
        f'sensitivity_mv_per_unit = {sens}\nbearing = "{b}"\naxis = "{ax}"\nangle_deg = {ang}\n'
        for n, c, k, sens, b, ax, ang in probes)
    return (f'[machine]\nname = "Scenario rig {name}"\nkind = "{kind}"\n'
            f"rated_speed_rpm = {nmc}\nmin_operating_speed_rpm = {nmin}\n"
            f'max_continuous_speed_rpm = {nmc}\nprofile = "api617"\n\n'
            f'[tach]\ncolumn = "ch1"\nedge = "{edge}"\n{tables}\n'
            f'[data]\nformat = "wav"\nfull_scale_v = 1.0\n{extra}\n')


XY_PROBES = (("A-X", "ch2", "proximity", 7.874, "A", "X", 0),
             ("A-Y", "ch3", "proximity", 7.874, "A", "Y", 90))


def _response(rpm, fn_rpm, zeta, e_um):
    r = np.asarray(rpm) / fn_rpm
    return e_um * r * r / (1.0 - r * r + 2j * zeta * r)


def _process(db, tmp_path, name, sweep, *, fs, fn_rpm, zeta, e_um, runout_um=3.0,
             noise_um=0.1, notch_deg=None, probes=None, nmin, nmc, extra="", seed=0):
    """Write, import and process one run; return (findings, run id, machine text)."""
    t = np.arange(int(sweep.duration_s * fs)) / fs
    th = sweep.theta(t)
    rng = np.random.default_rng(seed)
    if probes is None:
        h = _response(sweep.rpm(t), fn_rpm, zeta, e_um) + runout_um * np.exp(-1j)
        x = np.real(h * np.exp(2j * np.pi * th))
        y = np.real(h * np.exp(2j * np.pi * th - 0.5j * np.pi))
    else:
        x, y = probes(t, th)
    x = x + noise_um * rng.standard_normal(t.size)
    y = y + noise_um * rng.standard_normal(t.size)
    if notch_deg is None:
        tach, edge = 0.1 * tach_waveform(th, ramp_rev=0.01), "rising"
    else:
        tach, edge = 0.1 * notch_tach(th, notch_deg), "falling"
    path = tmp_path / f"{name}.wav"
    data = np.stack([tach, x * SENS_V_PER_UM, y * SENS_V_PER_UM]).T.astype(np.float32)
    wavfile.write(str(path), int(fs), data)
    text = _machine(name, nmin=nmin, nmc=nmc, edge=edge, probes=XY_PROBES, extra=extra)
    desc = parse_machine_description(text, f"{name}.toml")
    res = import_run(db, path, desc, description_text=text)
    return process_run(db, res.run_id).findings, res.run_id


class TestNoResonanceWithANotchedTach:
    def test_nothing_reported_a_tach_warning_and_a_pass(self, db, tmp_path):
        # 500 -> 4500 rpm at 50 rpm/s and 30 s at 4500 rpm, the rotor's critical at
        # 15 000 rpm (none in the range), recorded at 5 kHz with a 6 deg notch: 1.1 to
        # 1.25 samples wide at 4000-4500 rpm, so every event sits on the sample grid.
        sweep = piecewise_sweep([0, 80, 110], [500, 4500, 4500])
        f, _ = _process(db, tmp_path, "notch", sweep, fs=5000.0, fn_rpm=15000.0, zeta=0.05,
                        e_um=5.0, notch_deg=6.0, nmin=4000, nmc=4500)
        assert f["criticals"] == []
        assert any(w.startswith("TachQualityWarning: tach edges span 1.0 sample interval(s)")
                   and "quantised to the sample grid" in w for w in f["warnings"])
        assert any("speed model fitted through the tach event jitter" in w for w in f["warnings"])
        assert f["run_verdict"] == "pass"


class TestFastSweepBeating:
    def test_zeta_002_at_300_rpm_s_gives_one_critical_per_probe(self, db, tmp_path):
        # 300 -> 6000 rpm at 300 rpm/s through fn = 3000 rpm, zeta 0.02: the transient
        # response (scipy.signal.lsim of x'' + 2 zeta wn x' + wn^2 x = e (w^2 cos theta +
        # w' sin theta)) rings at wn after the passage and beats with the 1X (F. M. Lewis,
        # Trans. ASME 54, 1932); the ripple is not a critical.
        sweep = piecewise_sweep([0, 19, 21], [300, 6000, 6000])
        fn, zeta, e = 3000.0, 0.02, 1.0
        wn = 2 * np.pi * fn / 60.0
        ss = sg.StateSpace([[0.0, 1.0], [-wn * wn, -2 * zeta * wn]], [[0.0], [1.0]],
                           [[1.0, 0.0]], [[0.0]])

        def probes(t, th):
            w = 2 * np.pi * sweep.rpm(t) / 60.0
            alpha = np.gradient(w, t)
            out = []
            for off in (0.0, -0.5 * np.pi):
                u = e * (w * w * np.cos(2 * np.pi * th + off) + alpha * np.sin(2 * np.pi * th + off))
                h0 = e * w[0] ** 2 / (wn ** 2 - w[0] ** 2 + 2j * zeta * wn * w[0]) * np.exp(1j * off)
                _, y, _ = sg.lsim(ss, u, t, X0=[h0.real, (1j * w[0] * h0).real])
                out.append(y)
            return out

        f, _ = _process(db, tmp_path, "beat", sweep, fs=5000.0, fn_rpm=fn, zeta=zeta, e_um=e,
                        probes=probes, noise_um=0.3, nmin=4500, nmc=5000)
        crits = f["criticals"]
        assert sorted(c["probe"] for c in crits) == ["A-X", "A-Y"]
        for c in crits:
            # the apparent peak moves in the sweep direction (Lewis 1932), within 3 zeta
            assert 3000.0 < c["speed_rpm"] < 3000.0 * (1 + 3 * zeta)
            assert any("post-resonance beating" in e for e in c["evidence"])
            assert c["sweep_note"]


class TestSlowRollYouCanTrust:
    # 30 s of slow roll at 200 rpm, a 10-minute warm-up hold at 1200 rpm, then up to
    # 10 000 rpm through Nc = 3000 rpm (zeta 0.05, 20 um peak unbalance response, 4 um
    # runout). The longest low-speed dwell is the warm-up hold, where the dynamic
    # response is 0.16 / 0.84 = 19 % of its high-speed level: compensating with it would
    # put the 1X well off the model above the critical.
    KNOTS = ([0, 5, 35, 45, 645, 733], [100, 200, 200, 1200, 1200, 10000])

    def _run(self, db, tmp_path, name, extra=""):
        return _process(db, tmp_path, name, piecewise_sweep(*self.KNOTS), fs=2048.0,
                        fn_rpm=3000.0, zeta=0.05, e_um=20.0, runout_um=4.0, noise_um=0.3,
                        nmin=5000, nmc=5600, extra=extra)

    def test_window_in_the_slow_roll_band_and_1x_within_3_pct_of_the_model(self, db, tmp_path):
        f, run_id = self._run(db, tmp_path, "slowroll")
        lo, hi = f["processing"]["slow_roll_rpm"]
        # below 20 % of the first candidate critical, the unbalance-response peak at
        # fn / sqrt(1 - 2 zeta^2) = 3007.5 rpm (closed form); 0.5 % for finding it
        assert lo <= 200.0 <= hi <= 0.2 * 3007.5 * 1.005
        assert "chosen from the data" in f["processing"]["slow_roll_basis"]
        with db.read() as conn:
            (tr,) = q.load_tracks(conn, run_id, order=1.0, compensated=True, probe_name="A-X")
        # the dwell rule alone would have taken the warm-up hold
        dwell = auto_slow_roll_window(tr.speed_rpm, tr.time_s)
        assert dwell[0] <= 1200.0 <= dwell[1]
        # above the critical: the compensated 1X (um p-p) against the model, in 100 rpm
        # bins (the per-revolution noise averaged out): within 3 %
        model = 2.0 * np.abs(_response(tr.speed_rpm, 3000.0, 0.05, 20.0))
        above = tr.speed_rpm > 4500.0
        edges = np.arange(4500.0, 10001.0, 100.0)
        k = np.digitize(tr.speed_rpm[above], edges)
        ours = np.array([tr.amplitude[above][k == i].mean() for i in np.unique(k)])
        ref = np.array([model[above][k == i].mean() for i in np.unique(k)])
        assert_allclose(ours, ref, rtol=0.03)

    def test_machine_description_overrides(self, db, tmp_path):
        f, _ = self._run(db, tmp_path, "slowroll-fixed",
                         extra="\n[processing]\nslow_roll_rpm = [150, 250]\n")
        assert f["processing"]["slow_roll_rpm"] == [150.0, 250.0]
        assert f["processing"]["slow_roll_basis"] == \
            "[processing] slow_roll_rpm of the machine description"


class TestStopAndRestart:
    def test_coast_down_to_zero_a_stop_and_a_restart_process(self, db, tmp_path):
        # 3000 rpm, a coast-down to standstill, 10 s stopped, a restart to 3000 rpm
        # (issue 16: the automatic slow-roll window failed with IndexError here)
        sweep = piecewise_sweep([0, 5, 65, 75, 135, 140], [3000, 3000, 0, 0, 3000, 3000])
        f, _ = _process(db, tmp_path, "stop", sweep, fs=2048.0, fn_rpm=2000.0, zeta=0.05,
                        e_um=20.0, noise_um=0.3, nmin=2800, nmc=3100)
        # one critical per probe and direction, at the unbalance-response peak
        # fn / sqrt(1 - 2 zeta^2) = 2005 rpm (closed form); 0.5 %
        assert sorted((c["probe"], c["direction"]) for c in f["criticals"]) == [
            ("A-X", "coast-down"), ("A-X", "run-up"), ("A-Y", "coast-down"), ("A-Y", "run-up")]
        for c in f["criticals"]:
            assert c["speed_rpm"] == pytest.approx(2000.0 / np.sqrt(1 - 2 * 0.05 ** 2), rel=5e-3)


class TestVerdictsOfWhatTheRunCovers:
    def test_run_up_below_the_operating_range_is_not_judged(self, db, tmp_path):
        # 600 -> 1200 rpm, operating range 2600-2900 rpm (issue 16: this was a pass)
        sweep = piecewise_sweep([0, 30], [600, 1200])
        f, _ = _process(db, tmp_path, "short", sweep, fs=2048.0, fn_rpm=9000.0, zeta=0.05,
                        e_um=5.0, nmin=2600, nmc=2900)
        assert f["run_verdict"] == "not judged"
        assert any(re.match(r"the run never reached the operating range: top speed 1[12]\d\d "
                            r"rpm, range 2600-2900 rpm", w) for w in f["warnings"])

    def test_slow_run_up_is_a_run_up_with_a_cascade(self, db, tmp_path):
        # 0.7 rpm/s for 54 minutes, 600 -> 2868 rpm (issue 16: read as steady throughout,
        # nothing judged, and one cascade row from tach jitter summed as speed travel)
        sweep = piecewise_sweep([0, 3240], [600, 600 + 0.7 * 3240])
        f, run_id = _process(db, tmp_path, "slow", sweep, fs=512.0, fn_rpm=2000.0, zeta=0.05,
                             e_um=20.0, noise_um=0.3, nmin=2600, nmc=2900)
        with db.read() as conn:
            assert q.get_run(conn, run_id).kind == "run-up"
        assert not any("no run-up or coast-down" in w for w in f["warnings"])
        assert {c["direction"] for c in f["criticals"]} == {"run-up"}
        with db.read() as conn:
            casc = q.load_cascades(conn, run_id)
        # a row every 50 rpm of the 2268 rpm travelled: 46 rows (the cascade step)
        assert casc and all(c.speed_rpm.size == pytest.approx(46, abs=2) for c in casc)


VELOCITY_MACHINE = _machine(
    "velocity", nmin=4500, nmc=5200, kind="fan",
    probes=(("A-X", "ch2", "proximity", 7.874, "A", "X", 0),
            ("A-VEL", "ch3", "velocity", 100.0, "A", "none", 0),
            ("B-VEL", "ch4", "velocity", 100.0, "B", "none", 0)))


class TestVelocityProbes:
    def test_margins_from_proximity_probes_and_integrated_elsewhere(self, db, tmp_path):
        # SDOF unbalance response (fn 3000 rpm, zeta 0.12, 20 um peak) seen by a
        # proximity probe and, as velocity (j omega x, mm/s), by two seismic probes: one at
        # bearing A beside the proximity probe, one alone at bearing B. Closed forms
        # (DEVELOPERS.md, Reference values): displacement peak 3000 / sqrt(1 - 2 zeta^2)
        # = 3044 rpm; velocity peak at r^2 = 2 - 4 zeta^2 - sqrt(1 - 16 zeta^2 +
        # 16 zeta^4), 3094 rpm.
        fs, zeta = 2048.0, 0.12
        sweep = piecewise_sweep([0, 120], [300, 6000])
        t = np.arange(int(sweep.duration_s * fs)) / fs
        th = sweep.theta(t)
        w = 2 * np.pi * sweep.rpm(t) / 60.0
        h_um = _response(sweep.rpm(t), 3000.0, zeta, 20.0)
        rng = np.random.default_rng(4)
        x_um = np.real(h_um * np.exp(2j * np.pi * th)) + 0.1 * rng.standard_normal(t.size)
        v = np.real(1j * w * h_um * 1e-3 * np.exp(2j * np.pi * th))  # mm/s
        v_a = v + 0.01 * rng.standard_normal(t.size)
        v_b = v + 0.01 * rng.standard_normal(t.size)
        data = np.stack([0.1 * tach_waveform(th, ramp_rev=0.02), x_um * SENS_V_PER_UM,
                         0.1 * v_a, 0.1 * v_b]).T.astype(np.float32)
        path = tmp_path / "velocity.wav"
        wavfile.write(str(path), int(fs), data)
        desc = parse_machine_description(VELOCITY_MACHINE, "v.toml")
        res = import_run(db, path, desc, description_text=VELOCITY_MACHINE)
        f = process_run(db, res.run_id).findings
        by = {c["probe"]: c for c in f["criticals"]}
        assert set(by) == {"A-X", "A-VEL", "B-VEL"}
        rd = 3000.0 / np.sqrt(1 - 2 * zeta ** 2)
        rv = 3000.0 * np.sqrt(2 - 4 * zeta ** 2 - np.sqrt(1 - 16 * zeta ** 2 + 16 * zeta ** 4))
        # 0.5 %: the finder's accuracy on SDOF peaks (tests/analysis/test_criticals.py)
        assert by["A-X"]["speed_rpm"] == pytest.approx(rd, rel=5e-3)
        # beside a proximity probe: shown as measured, not counted, and said why
        a = by["A-VEL"]
        assert a["speed_rpm"] == pytest.approx(rv, rel=5e-3)
        assert a["counts_for_run_verdict"] is False
        assert a["margin_reason"].startswith("not counted in the run verdict: bearing A's "
                                             "margins are judged from its proximity probes (A-X)")
        (eq,) = [e for e in a["evidence"] if "displacement-equivalent" in e]
        assert float(eq.split("peaks at ")[1].split(" rpm")[0]) == pytest.approx(rd, rel=5e-3)
        # alone at its bearing: read on the displacement-equivalent 1X, counted
        b = by["B-VEL"]
        assert b["speed_rpm"] == pytest.approx(rd, rel=5e-3)
        assert b["counts_for_run_verdict"] is True
        assert any("displacement-equivalent" in e for e in b["evidence"])
