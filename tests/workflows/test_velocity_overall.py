"""The band-limited velocity overall through the whole pipeline: a WAV written by
scipy.io.wavfile -> import -> process on a real SQLite file -> the ISO zone check of a
steady hold judges the 10–1000 Hz rms, not the rms as recorded.

References: the band, ISO 10816-1 / 20816-1 (from memory); the zone boundaries of
ISO 10816-3 group 1, rigid support, 2.3 / 4.5 / 7.1 mm/s rms (from memory, as
rundash/analysis/zones.py); the filter's gain, the closed form of tests/dsp/test_overall.py
(Butterworth by the bilinear transform, Oppenheim & Schafer, Discrete-Time Signal
Processing, 3rd ed., ch. 7); the rms of a sine over whole periods, A / sqrt(2).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.io import wavfile

from rundash.dsp import overall
from rundash.ingest.importer import import_run
from rundash.ingest.machine_file import parse_machine_description
from rundash.presentation import level_title, limit_rows
from rundash.storage import queries as q
from rundash.storage.engine import open_database
from rundash.workflows.pipeline import ProcessingParams, process_run
from tests.dsp.test_overall import butterworth_gain
from tests.synth import piecewise_sweep, tach_waveform

FS = 12800.0  # 256 samples per revolution at 3000 rpm
MACHINE = """
tach = { column = "ch1" }
data = { full_scale_v = 10.0 }
probes = [{ name = "B-V", column = "ch2", kind = "velocity", units = "mm/s", sensitivity_mv_per_unit = 20.0 }]

[machine]
name = "Band rig"
kind = "fan"
rated_speed_rpm = 3000
min_operating_speed_rpm = 2800
max_continuous_speed_rpm = 3100
"""
DC, A1, A_HI, F_HI = 5.0, 3.0, 4.0, 4000.0  # mm/s offset, 1X pk, 4 kHz pk (80 per rev)


@pytest.fixture(scope="module")
def processed(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("band")
    sweep = piecewise_sweep([0.0, 8.0, 74.0], [600.0, 3000.0, 3000.0])  # 66 s hold
    t = np.arange(int(sweep.duration_s * FS)) / FS
    theta = sweep.theta(t)
    v = DC + A1 * np.cos(2 * np.pi * theta) + A_HI * np.sin(2 * np.pi * F_HI * t)
    volts = np.vstack([tach_waveform(theta, ramp_rev=0.02), v * 20e-3])
    path = tmp / "band.wav"
    wavfile.write(path, int(FS), (volts.T / 10.0).astype(np.float32))
    db = open_database(str(tmp / "band.sqlite"), create=True)
    desc = parse_machine_description(MACHINE, "m.toml")
    res = import_run(db, path, desc, description_text=MACHINE, kind="mixed")
    out = process_run(db, res.run_id, params=ProcessingParams(slow_roll_rpm=(600.0, 700.0)))
    yield db, res.run_id, out
    db.dispose()


def test_hold_judged_on_the_band_limited_overall(processed):
    db, run_id, out = processed
    f = out.findings
    band = overall.velocity_band(FS, rated_speed_rpm=3000.0)
    assert f["processing"]["velocity_overall"]["label"] == "10-1000 Hz"
    assert f["probes"][0]["level_band"] == "10-1000 Hz"
    hold = [r for r in f["limits"] if r["where"] == "steady hold" and r["measure"] == "direct"
            and r["limit_id"].startswith("iso-velocity")]
    assert len(hold) == 1
    # expected: the band's gain on 1X (50 Hz) and on 4 kHz, DC gone, rms of two sines over
    # whole periods of a 256-sample revolution; one sample more or less in a revolution's
    # window changes the mean square by at most 1/256 of it
    g1, gh = butterworth_gain(50.0, band, FS), butterworth_gain(F_HI, band, FS)
    expect = np.sqrt((g1 * A1) ** 2 + (gh * A_HI) ** 2) / np.sqrt(2)
    assert hold[0]["value"] == pytest.approx(expect, rel=1 / 256)
    as_recorded = np.sqrt(DC ** 2 + (A1 ** 2 + A_HI ** 2) / 2)  # 6.1 mm/s: zone C
    assert as_recorded > 4.5
    # ISO 10816-3 group 1 rigid (from memory): below 2.3 mm/s rms is zone A
    assert hold[0]["zone"] == "A" and hold[0]["verdict"] == "within"
    assert "overall 10-1000 Hz" in hold[0]["basis"]
    row = next(r for r in limit_rows(f) if r["where"] == "steady hold"
               and r["source"] == hold[0]["source"] and r["zone"] == "A")
    assert row["measure"] == "overall 10–1000 Hz"
    assert level_title(f, "B-V") == "Overall level (10–1000 Hz)"


def test_stored_direct_level_is_the_band_rms_and_the_1x_is_not_filtered(processed):
    db, run_id, _ = processed
    with db.read() as conn:
        (tr,) = q.load_tracks(conn, run_id, order=1.0, probe_name="B-V")
    held = tr.time_s > 9.0  # the hold from 8 s on, a second after the ramp
    band = overall.velocity_band(FS, rated_speed_rpm=3000.0)
    g1, gh = butterworth_gain(50.0, band, FS), butterworth_gain(F_HI, band, FS)
    expect = np.sqrt((g1 * A1) ** 2 + (gh * A_HI) ** 2) / np.sqrt(2)
    np.testing.assert_allclose(tr.direct[held], expect, rtol=1 / 256)
    # the 1X vector is the tracker's, from the samples as recorded: 3 mm/s pk
    np.testing.assert_allclose(tr.amplitude[held], A1, rtol=2e-3)
