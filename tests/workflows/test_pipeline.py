"""End to end through real files and a real SQLite database: a WAV written by
scipy.io.wavfile -> import -> process -> stored 1X/2X vectors against the closed form that
made the signal. The tracker sees the record chunk by chunk, as in production."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.io import wavfile

from rundash.conventions import wrap_deg
from rundash.ingest.importer import import_run
from rundash.ingest.machine_file import parse_machine_description
from rundash.workflows.pipeline import ProcessingParams, process_run
from rundash.storage import queries as q
from tests.conftest import DB_KINDS, fresh_database_url
from tests.synth import linear_sweep, probe_signal, tach_waveform

FS = 5120.0
MACHINE = """
[machine]
name = "Synthetic rig"
kind = "fan"
rated_speed_rpm = 3000
min_operating_speed_rpm = 2800
max_continuous_speed_rpm = 3100

[tach]
column = "ch1"

[[probes]]
name = "A-X"
column = "ch2"
kind = "proximity"
units = "um"
sensitivity_mv_per_unit = 7.874

[[probes]]
name = "A-V"
column = "ch3"
kind = "velocity"
units = "mm/s"
sensitivity_mv_per_unit = 20.0

[data]
full_scale_v = 10.0
"""

SLOW_ROLL_UM = 5.0  # constant runout vector, 1X, lag 30 deg (shaft-fixed, so in phase with theta)


def amp_um(rpm):
    """A smooth, resonance-like 1X amplitude (um pp) used as the known answer."""
    r = rpm / 2000.0
    return 80.0 * r**2 / np.sqrt((1 - r**2) ** 2 + (2 * 0.1 * r) ** 2)


def lag_deg(rpm):
    r = rpm / 2000.0
    return np.degrees(np.arctan2(2 * 0.1 * r, 1 - r**2))


@pytest.fixture(scope="module", params=DB_KINDS)
def processed(request, tmp_path_factory):
    tmp = tmp_path_factory.mktemp("pipe")
    with fresh_database_url(request.param, tmp) as url:
        yield from _processed(tmp, url)


def _processed(tmp, url):
    sweep = linear_sweep(300.0, 200.0, 14.0)  # 300 -> 3100 rpm at 200 rpm/s
    t = np.arange(int(sweep.duration_s * FS)) / FS
    theta = sweep.theta(t)
    rpm = sweep.rpm(t)
    # dynamic 1X response plus a slow-roll (runout) vector, in um; 7.874 mV/um
    x_um = probe_signal(theta, amp_um(rpm) / 2, lag_deg(rpm), harmonics=[(2, 3.0, 60.0)])
    x_um = x_um + SLOW_ROLL_UM / 2 * np.cos(2 * np.pi * theta - np.radians(30.0))
    v_mm_s = probe_signal(theta, 0.002 * rpm, 10.0)  # velocity 1X peak grows with speed
    volts = np.vstack([tach_waveform(theta, ramp_rev=0.02), x_um * 7.874e-3, v_mm_s * 20e-3])
    path = tmp / "synthetic.wav"
    wavfile.write(path, int(FS), (volts.T / 10.0).astype(np.float32))
    from rundash.storage.engine import open_database
    db = open_database(url, create=True)
    desc = parse_machine_description(MACHINE, "m.toml")
    res = import_run(db, path, desc, description_text=MACHINE, kind="mixed")
    out = process_run(db, res.run_id, params=ProcessingParams(slow_roll_rpm=(300.0, 360.0)))
    yield db, res.run_id, out
    db.dispose()


class TestProcessRun:
    def test_run_kind_and_revolutions(self, processed):
        db, run_id, out = processed
        assert out.run_kind == "run-up"
        # revolutions in 14 s: theta(14) = 300/60*14 + 0.5*200/60*14^2 = 396.67
        assert out.n_revs == pytest.approx(396, abs=1)
        with db.read() as conn:
            assert q.get_run(conn, run_id).kind == "run-up"

    def test_uncompensated_1x_matches_the_signal(self, processed):
        db, run_id, _ = processed
        with db.read() as conn:
            (tr,) = q.load_tracks(conn, run_id, order=1.0, compensated=False, probe_name="A-X")
        # expected: dynamic vector + runout vector, as complex phasors (pp)
        c = amp_um(tr.speed_rpm) * np.exp(-1j * np.radians(lag_deg(tr.speed_rpm))) + \
            SLOW_ROLL_UM * np.exp(-1j * np.radians(30.0))
        # float32 WAV + per-rev DFT of a sweeping signal: 0.5 % and 0.5 deg (issue 3 accuracy)
        assert_allclose(tr.amplitude, np.abs(c), rtol=5e-3)
        dphi = wrap_deg(tr.phase_lag_deg - np.degrees(-np.angle(c)) + 180) - 180
        assert np.max(np.abs(dphi)) < 0.5

    def test_compensated_1x_removes_the_slow_roll_vector(self, processed):
        db, run_id, out = processed
        with db.read() as conn:
            (tr,) = q.load_tracks(conn, run_id, order=1.0, compensated=True, probe_name="A-X")
            proc = q.load_processing(conn, run_id)
        assert proc.slow_roll_rpm == (300.0, 360.0)
        # the dynamic part at 300-360 rpm is 80*0.0225... um ~ 1.8 um: subtracted too, so
        # compare to the closed form minus its own window mean
        sel = (tr.speed_rpm >= 300) & (tr.speed_rpm <= 360)
        c_dyn = amp_um(tr.speed_rpm) * np.exp(-1j * np.radians(lag_deg(tr.speed_rpm)))
        expect = c_dyn - c_dyn[sel].mean()
        hi = tr.speed_rpm > 1000
        assert_allclose(tr.amplitude[hi], np.abs(expect[hi]), rtol=5e-3)

    def test_seismic_channel_is_never_compensated(self, processed):
        db, run_id, _ = processed
        with db.read() as conn:
            assert q.load_tracks(conn, run_id, probe_name="A-V", compensated=True) == []
            (v,) = q.load_tracks(conn, run_id, probe_name="A-V", order=1.0)
        # velocity vectors are peak (not p-p): 0.002 * rpm mm/s pk
        assert_allclose(v.amplitude, 0.002 * v.speed_rpm, rtol=5e-3)

    def test_2x_vector_equals_one_call_on_the_whole_record_and_cascade_stored(self, processed):
        # The per-revolution DFT of a strongly sweeping 1X leaks a little into 2X (a few %
        # here; the dsp tests bound the tracker itself). What the pipeline must add nothing
        # to: chunked reading from storage gives what one in-memory call on the same
        # float32 samples gives.
        from rundash.dsp.orders import track_orders
        from rundash.dsp.speed import speed_profile
        db, run_id, _ = processed
        with db.read() as conn:
            (tr2,) = q.load_tracks(conn, run_id, order=2.0, compensated=False, probe_name="A-X")
            casc = q.load_cascades(conn, run_id)
            ch = next(c for c in q.list_channels(conn, run_id) if c.probe_name == "A-X")
            x = q.read_channel(conn, ch.id)
            revs = q.load_tach(conn, run_id)
        ref = track_orders(x[None], FS, speed_profile(revs), orders=(1, 2))
        # float32 samples (eps 6e-8) of a signal whose 1X is ~70 x the 2X: 1e-5 relative
        assert_allclose(tr2.amplitude, 2 * np.abs(ref.vectors[0, 1]), rtol=1e-5)
        assert np.median(tr2.amplitude) == pytest.approx(6.0, rel=0.03)  # 3 um pk = 6 um pp
        assert len(casc) == 2 and casc[0].amplitude.shape[0] == casc[0].speed_rpm.size > 10

    def test_reprocessing_replaces_results(self, processed):
        db, run_id, _ = processed
        process_run(db, run_id, params=ProcessingParams(orders=(1.0,),
                                                        slow_roll_rpm=(300.0, 360.0)))
        with db.read() as conn:
            tracks = q.load_tracks(conn, run_id)
        assert {t.order for t in tracks} == {1.0}
        assert len(tracks) == 3  # A-X raw + compensated, A-V raw


@pytest.mark.parametrize("side", ["findings", "writer"])
def test_a_failure_on_either_side_of_the_save_leaves_the_run_as_it_was(tmp_path, monkeypatch,
                                                                       side):
    # the results are written by a second thread while the findings are computed: an error
    # in the analysis or in the database's writes rolls the one transaction back, the error
    # reaches the caller, and the database takes the next write at once (no thread left
    # holding its lock)
    import threading

    from rundash.storage.engine import open_database
    from rundash.workflows import findings as findings_mod
    from tests.conftest import db_fingerprint

    gen = _processed(tmp_path, f"sqlite:///{tmp_path / 'r.sqlite'}")
    db, run_id, _ = next(gen)
    with db.read() as conn:
        before = [(t.order, t.compensated, t.amplitude.copy()) for t in q.load_tracks(conn, run_id)]
    fingerprint = db_fingerprint(db)

    def broken(*args, **kwargs):
        raise RuntimeError(f"injected failure on the {side} side")

    if side == "findings":
        monkeypatch.setattr(findings_mod, "build_findings", broken)
    else:
        monkeypatch.setattr(q, "save_cascade", broken)
    with pytest.raises(RuntimeError, match=f"injected failure on the {side} side"):
        process_run(db, run_id, params=ProcessingParams(slow_roll_rpm=(300.0, 360.0)))
    assert not [t for t in threading.enumerate() if t.name == "rundash-save"]
    assert db_fingerprint(db) == fingerprint  # nothing of the failed write stayed
    with db.read() as conn:
        after = [(t.order, t.compensated, t.amplitude) for t in q.load_tracks(conn, run_id)]
    assert len(after) == len(before)
    for (o1, c1, a1), (o2, c2, a2) in zip(before, after):
        assert (o1, c1) == (o2, c2)
        np.testing.assert_array_equal(a1, a2)
    monkeypatch.undo()
    out = process_run(db, run_id, params=ProcessingParams(slow_roll_rpm=(300.0, 360.0)))
    assert out.run_kind == "run-up"
    db.dispose()
    reopened = open_database(f"sqlite:///{tmp_path / 'r.sqlite'}")
    with reopened.read() as conn:
        assert len(q.load_tracks(conn, run_id)) == len(before)
    reopened.dispose()
