"""rundash.workflows.live: incremental processing equals the offline pipeline; warnings come in the
right order at the right speeds; a killed recorder leaves a valid, processable run."""

from __future__ import annotations

import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.optimize import brentq

from rundash.ingest.machine_file import load_machine_description
from rundash.ingest.sources import ReplaySource
from rundash.workflows.live import LiveParams, WarningSettings, record_live
from rundash.workflows.pipeline import process_run
from rundash.storage import live_queries as lq
from rundash.storage import queries as q
from rundash.storage.engine import open_database
from tests import live_synth

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture
def machine(tmp_path):
    p = tmp_path / "machine.toml"
    p.write_text(live_synth.MACHINE, encoding="utf-8")
    return load_machine_description(p)


def _wrap(d):
    return (np.asarray(d) + 180.0) % 360.0 - 180.0


def _replay(db, machine, path, **kw):
    desc, text = machine
    return record_live(db, desc, ReplaySource(path, desc.data, speed=0), description_text=text,
                       **kw)


class TestLiveEqualsOffline:
    def test_vectors_agree_with_process_run(self, db, machine, tmp_path):
        # a run-up 600 -> 5600 rpm at 100 rpm/s through a critical at 3000 rpm
        wav = tmp_path / "up.wav"
        live_synth.write_run(wav, [0, 50], [600, 5600], seed=1)
        res = _replay(db, machine, wav)
        assert res.state == "complete" and res.processed and res.error is None
        with db.read() as conn:
            live = lq.load_live_tracks(conn, res.run_id)
            off = [t for t in q.load_tracks(conn, res.run_id, compensated=False)
                   if t.order in (1.0, 2.0)]  # live tracks orders 1 and 2 by default
            run = q.get_run(conn, res.run_id)
        assert run.state == "complete"
        assert len(live) == len(off) == 4  # 2 probes x orders 1, 2
        for a, b in zip(live, off):
            assert (a.probe_name, a.order) == (b.probe_name, b.order)
            # every revolution of the offline track, none missing or extra
            assert a.time_s.size == b.time_s.size
            assert_allclose(a.time_s, b.time_s, rtol=0, atol=1e-9)
            assert_allclose(a.speed_rpm, b.speed_rpm, rtol=1e-9)
            if a.order == 1.0:
                # issue 3's tolerances: 0.5 % amplitude, 0.5 deg phase (project's own
                # order-tracking targets); measured ~1e-6 and ~0.003 deg
                assert_allclose(a.amplitude, b.amplitude, rtol=5e-3)
                assert np.max(np.abs(_wrap(a.phase_lag_deg - b.phase_lag_deg))) < 0.5
            assert_allclose(a.direct, b.direct, rtol=1e-6)

    def test_live_1x_follows_the_closed_form_response(self, db, machine, tmp_path):
        wav = tmp_path / "up.wav"
        info = live_synth.write_run(wav, [0, 50], [600, 5600], seed=2)
        res = _replay(db, machine, wav, params=LiveParams(process_at_end=False))
        with db.read() as conn:
            tr = lq.load_live_tracks(conn, res.run_id, order=1.0)[0]
        # quasi-steady SDOF unbalance response (Rao, Mechanical Vibrations, 5th ed., 3.7):
        # 1X p-p = 2 |H|, lag = arg of the denominator. Away from the peak a per-rev
        # average of a 100 rpm/s sweep stays within 1 % of it; the white noise (0.2 um
        # rms per sample) adds, per revolution of N samples, an error of rms
        # 0.2 sqrt(2 / N) um to the peak amplitude (least-squares sinusoid fit, common
        # practice, no source): allow 4 of those
        h = live_synth.response_um(tr.speed_rpm)
        far = np.abs(tr.speed_rpm - 3000) > 400
        n_rev = info["fs"] * 60.0 / tr.speed_rpm[far]
        sigma_pk = 0.2 * np.sqrt(2.0 / n_rev)
        err = np.abs(tr.amplitude[far] - 2 * np.abs(h[far]))
        assert np.all(err <= 0.01 * 2 * np.abs(h[far]) + 4 * 2 * sigma_pk)
        lag = np.degrees(-np.angle(h))
        dphi = np.abs(_wrap(tr.phase_lag_deg[far] - lag[far]))
        assert np.all(dphi <= 1.0 + 4 * np.degrees(sigma_pk / np.abs(h[far])))


class TestWarnings:
    def _earlier(self, db, machine, tmp_path):
        wav = tmp_path / "earlier.wav"
        live_synth.write_run(wav, [0, 50], [600, 5600], seed=3)
        res = _replay(db, machine, wav)
        assert res.processed
        return res

    def test_order_and_speeds_on_a_run_with_a_hold_in_the_band(self, db, machine, tmp_path):
        self._earlier(db, machine, tmp_path)
        # run 2: up at 100 rpm/s, hold 14 s at 3000 rpm (inside the band), then on up
        wav = tmp_path / "hold.wav"
        live_synth.write_run(wav, [0, 24, 38, 64], [600, 3000, 3000, 5600], seed=4)
        alarm_um = 300.0
        params = LiveParams(warnings=WarningSettings(lead_time_s=10.0, dwell_limit_s=8.0),
                            alarms={"A-X": (alarm_um, "um pp", "test value")},
                            process_at_end=False)
        res = _replay(db, machine, wav, params=params)
        with db.read() as conn:
            events = lq.load_events(conn, res.run_id)
        kinds = [e.kind for e in events if e.kind not in ("note",)]
        band = events[0].details["bands"]
        assert len(band) == 1
        lo, crit, hi = band[0]
        # the earlier run's critical: the unbalance peak at wn / sqrt(1 - 2 zeta^2)
        # = 3007.5 rpm (DEVELOPERS.md "Reference values", closed form), half-power band ~ +-5 %
        assert abs(crit - 3007.5) < 0.01 * 3007.5
        assert lo < 3000 < hi
        order = [k for k in kinds if k in ("approaching", "entered-band", "level-high",
                                            "dwell", "left-band", "level-normal")]
        # expected order: the approach warning (lead 10 s = 1000 rpm before the band),
        # the alarm where 2 |H| crosses 300 um (about 2600 rpm, below the band), the band
        n_cross = brentq(lambda n: 2 * abs(live_synth.response_um(n)) - alarm_um, 2000, 3000)
        assert lo - 1000 < n_cross < lo
        assert order[:3] == ["approaching", "level-high", "entered-band"]
        assert "dwell" in order and order.index("dwell") < order.index("left-band")
        assert kinds[0] == "recording" and kinds[-1] == "recording-ended"
        ev = {k: next(e for e in events if e.kind == k) for k in set(kinds)}
        # approaching: the band edge within the lead time at the current acceleration
        a = ev["approaching"]
        assert lo - 10.0 * 100.0 - 60.0 <= a.speed_rpm < lo
        # the estimate is distance / acceleration (constant acceleration kinematics),
        # and the band is entered that long after the warning (to one update step)
        assert_allclose(a.details["accel_rpm_s"], 100.0, rtol=0.02)
        assert_allclose(a.details["time_to_band_s"], (lo - a.speed_rpm) / 100.0, rtol=0.02)
        e = ev["entered-band"]
        assert abs(e.time_s - (a.time_s + a.details["time_to_band_s"])) < 0.7
        assert lo <= e.speed_rpm <= lo + 60
        # dwell: raised once, dwell_limit after entering the band (to one update step)
        d = ev["dwell"]
        assert 8.0 < d.time_s - e.time_s < 8.0 + 0.6
        assert kinds.count("dwell") == 1
        # level alarm: where the closed-form 1X p-p (2 |H|) crosses the alarm value
        la = ev["level-high"]
        assert n_cross - 30 <= la.speed_rpm <= n_cross + 80
        assert la.details["probe"] == "A-X"
        left = ev["left-band"]
        assert hi <= left.speed_rpm <= hi + 60

    def test_site_levels_are_watched_and_a_shop_test_limit_is_not(self, db, tmp_path):
        # A-X has site levels; A-Y has none, and the profile's only direct limit (api617,
        # mechanical running test) is scoped to a shop test: nothing is watched on A-Y
        text = live_synth.MACHINE + (
            '\n[[levels]]\nprobe = "A-X"\nalert = 300.0\ntrip = 600.0\n'
            'source = "OEM manual, table 7 (invented for the test)"\n')
        p = tmp_path / "levels.toml"
        p.write_text(text, encoding="utf-8")
        machine = load_machine_description(p)
        wav = tmp_path / "up.wav"
        live_synth.write_run(wav, [0, 50], [600, 5600], seed=6)
        res = _replay(db, machine, wav, params=LiveParams(process_at_end=False))
        with db.read() as conn:
            events = lq.load_events(conn, res.run_id)
        high = [e for e in events if e.kind == "level-high"]
        # the quasi-steady 1X p-p 2 |H| peaks at 2 x 50 / (2 x 0.05) = 1000 um (closed
        # form, live_synth.response_um): both levels are crossed, on A-X only
        assert [e.details["probe"] for e in high] == ["A-X", "A-X"]
        assert "site alert level" in high[0].message and "site trip-style" in high[1].message
        for e, level in zip(high, (300.0, 600.0)):
            n = brentq(lambda n: 2 * abs(live_synth.response_um(n)) - level, 1000, 3000)
            assert n - 30 <= e.speed_rpm <= n + 80
            assert e.severity == "warning" and "alarm" not in e.message
        notes = [e.message for e in events if e.kind == "note"]
        assert any("shaft-direct-pp-test-stand is not watched live" in n for n in notes)

    def test_tach_lost_and_restored(self, db, machine, tmp_path):
        wav = tmp_path / "gap.wav"
        live_synth.write_run(wav, [0, 30], [1200, 2400], seed=5, tach_gap_s=(12.0, 15.0))
        res = _replay(db, machine, wav, params=LiveParams(process_at_end=False))
        with db.read() as conn:
            events = lq.load_events(conn, res.run_id)
        lost = [e for e in events if e.kind == "tach-lost"]
        back = [e for e in events if e.kind == "tach-restored"]
        assert len(lost) == 1 and len(back) == 1
        # lost within 0.5 s (min timeout) + one update step after the last pulse at 12 s
        assert 12.0 < lost[0].time_s <= 12.0 + 0.5 + 0.6
        assert 15.0 < back[0].time_s <= 15.0 + 2.6  # re-detected after the level window


class TestRobustness:
    def test_kill_9_leaves_a_valid_incomplete_run(self, tmp_path):
        wav = tmp_path / "up.wav"
        info = live_synth.write_run(wav, [0, 40], [600, 4600], seed=6)
        mfile = tmp_path / "machine.toml"
        mfile.write_text(live_synth.MACHINE, encoding="utf-8")
        dbp = tmp_path / "kill.sqlite"
        open_database(str(dbp), create=True).dispose()  # migrate before the recorder starts
        env = dict(os.environ, PYTHONPATH=str(ROOT))
        cmd = [sys.executable, "-m", "rundash.cli", "record", "--db", str(dbp), "--machine",
               str(mfile), "--source", f"replay:{wav}@8"]
        proc = subprocess.Popen(cmd, cwd=str(tmp_path), env=env, stdout=subprocess.PIPE,
                                stderr=subprocess.PIPE)
        # wait until at least two chunks are stored, then kill -9 mid-run
        deadline = time.monotonic() + 60
        n = 0
        while time.monotonic() < deadline:
            time.sleep(0.2)
            try:
                with sqlite3.connect(str(dbp), timeout=5) as c:
                    n = c.execute("select coalesce(max(n_samples), 0) from run").fetchone()[0]
            except sqlite3.OperationalError:
                continue
            if n >= 2 * q.CHUNK_SAMPLES:
                break
        assert n >= 2 * q.CHUNK_SAMPLES, proc.stderr.read().decode() if proc.poll() else n
        proc.send_signal(signal.SIGKILL)
        proc.wait(10)
        with sqlite3.connect(str(dbp)) as c:
            assert c.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        db = open_database(str(dbp))
        with db.read() as conn:
            (run,) = q.list_runs(conn)
            chans = q.list_channels(conn, run.id)
            x = q.read_channel(conn, chans[1].id)
            status = lq.load_status(conn, run.id)
        assert run.state == "incomplete"
        assert x.size == run.duration_s * info["fs"] and x.size % q.CHUNK_SAMPLES == 0
        assert x.size < info["n"]
        assert status.state == "recording"  # a stale heartbeat: the recorder died
        # the partial run can be reviewed: processing works on what was stored
        pr = process_run(db, run.id)
        assert pr.n_blocks > 100
        # a restarted recorder starts a new run
        desc, text = load_machine_description(mfile)
        res = record_live(db, desc, ReplaySource(wav, desc.data, speed=0),
                          description_text=text, params=LiveParams(process_at_end=False))
        assert res.run_id != run.id and res.state == "complete"
        with db.read() as conn:
            assert q.get_run(conn, run.id).state == "incomplete"
            assert q.get_run(conn, res.run_id).n_channels == 3
        db.dispose()
