"""Each rule is judged only inside its scope: a shop (mechanical running) test limit does
not fail a field run-up, and judges a run marked as a shop test during a hold at N_mc.

Whole runs written as WAV files by scipy.io.wavfile, imported and processed into a real
database (SQLite and PostgreSQL). The probe signal is the 1X of a single-degree-of-freedom
rotor under unbalance, e r^2 / (1 - r^2 + 2 j zeta r) at the instantaneous speed (W. T.
Thomson and M. D. Dahleh, Theory of Vibration with Applications, 5th ed., 1998, sec.
3.3), plus a small runout vector and white noise; the Y probe sees it 90 deg later.

The rule (rundash/analysis/profiles/api617.toml, from memory): unfiltered shaft
vibration at most min(25.4, 25.4 sqrt(12000 / N_mc)) um p-p in the mechanical running
test (API 617, 8th ed., mechanical running test, clause not recalled); at N_mc = 13 500
rpm that is 25.4 sqrt(12000/13500) = 23.95 um p-p. Its scope: a run marked as a shop
test, during a steady hold at N_mc within 1 % for at least 600 s.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.io import wavfile

from rundash.ingest.importer import import_run
from rundash.ingest.machine_file import parse_machine_description
from rundash.workflows.pipeline import process_run
from tests.synth import piecewise_sweep, tach_waveform

pytestmark = pytest.mark.both_databases

SENS_V_PER_UM = 7.874e-3
N_MC = 13500.0
LIMIT_UM_PP = 25.4 * math.sqrt(12000.0 / N_MC)  # 23.95 um p-p
FS = 4096.0
FN_RPM, ZETA, E_UM = 3000.0, 0.10, 15.0

MACHINE = f"""[machine]
name = "Scope rig"
kind = "compressor"
rated_speed_rpm = {N_MC}
min_operating_speed_rpm = 10000
max_continuous_speed_rpm = {N_MC}
profile = "api617"

[tach]
column = "ch1"
edge = "rising"

[[probes]]
name = "A-X"
column = "ch2"
kind = "proximity"
units = "um"
sensitivity_mv_per_unit = 7.874
bearing = "A"
axis = "X"
angle_deg = 0

[[probes]]
name = "A-Y"
column = "ch3"
kind = "proximity"
units = "um"
sensitivity_mv_per_unit = 7.874
bearing = "A"
axis = "Y"
angle_deg = 90

[data]
format = "wav"
full_scale_v = 1.0
"""


def _top_pp_um():
    """Closed-form 1X p-p at N_mc: 2 |e r^2 / (1 - r^2 + 2 j zeta r)|."""
    r = N_MC / FN_RPM
    return 2 * E_UM * r * r / abs(1 - r * r + 2j * ZETA * r)


def _run(db, tmp_path, name, hold_s, test_kind, seed=0, levels=""):
    sweep = piecewise_sweep([0, 60, 60 + hold_s], [1000, N_MC, N_MC])
    t = np.arange(int(sweep.duration_s * FS)) / FS
    th = sweep.theta(t)
    r = sweep.rpm(t) / FN_RPM
    h = E_UM * r * r / (1 - r * r + 2j * ZETA * r) + 1.0 * np.exp(-1j)
    rng = np.random.default_rng(seed)
    x = np.real(h * np.exp(2j * np.pi * th)) + 0.1 * rng.standard_normal(t.size)
    y = np.real(h * np.exp(2j * np.pi * th - 0.5j * np.pi)) + 0.1 * rng.standard_normal(t.size)
    path = tmp_path / f"{name}.wav"
    data = np.stack([0.1 * tach_waveform(th, ramp_rev=0.01), x * SENS_V_PER_UM,
                     y * SENS_V_PER_UM]).T.astype(np.float32)
    wavfile.write(str(path), int(FS), data)
    text = MACHINE + levels
    desc = parse_machine_description(text, f"{name}.toml")
    res = import_run(db, path, desc, description_text=text, test_kind=test_kind)
    return process_run(db, res.run_id).findings


def _rule_rows(f):
    return [x for x in f["limits"] if x["limit_id"] == "shaft-direct-pp-test-stand"]


def test_shop_test_limit_is_reference_only_on_a_field_run_up(db, tmp_path):
    # the top of the run-up exceeds the shop-test limit (31.6 um p-p closed form against
    # 23.95), held 20 s only: the rule is shown, never judged
    assert _top_pp_um() > LIMIT_UM_PP * 1.2
    f = _run(db, tmp_path, "field", hold_s=20.0, test_kind="field")
    rows = _rule_rows(f)
    assert rows and all(x["verdict"] == "reference only" for x in rows)
    top = [x for x in rows if x["where"] == "top speed"]
    assert top and max(x["value"] for x in top) > LIMIT_UM_PP
    assert all(x["limit"] == pytest.approx(LIMIT_UM_PP, rel=1e-9) for x in rows)
    assert all("shop (mechanical running) test" in x["scope"] for x in rows)
    # the critical at 3000 rpm is 70 % below N_min: the run passes
    assert f["run_verdict"] == "pass"
    assert f["run"]["test_kind"] == "field"


def test_field_run_with_a_hold_at_n_mc_is_still_not_judged_by_it(db, tmp_path):
    f = _run(db, tmp_path, "field-hold", hold_s=610.0, test_kind="field")
    rows = _rule_rows(f)
    hold = [x for x in rows if x["where"] == "steady hold"]
    assert hold and all(x["verdict"] == "reference only" for x in hold)
    # the ISO zones judge the steady hold in the operating range: zone A at 13 500 rpm
    # (A/B boundary 4800/sqrt(13500) = 41.3 um p-p, ISO 7919-3 Annex A, from memory)
    iso = [x for x in f["limits"] if x["where"] == "steady hold"
           and x["limit_id"] == "iso-shaft-zones"]
    assert iso and all(x["zone"] == "A" and x["verdict"] == "within" for x in iso)
    assert f["run_verdict"] == "pass"


def test_shop_test_with_a_ten_minute_hold_at_n_mc_is_judged(db, tmp_path):
    f = _run(db, tmp_path, "shop", hold_s=610.0, test_kind="shop-test")
    assert f["run"]["test_kind"] == "shop-test"
    (h,) = [h for h in f["processing"]["holds"] if h["speed_rpm"] > 0.99 * N_MC]
    assert h["t_end_s"] - h["t_start_s"] >= 600.0
    hold = [x for x in _rule_rows(f) if x["where"] == "steady hold"]
    direct = [x for x in hold if x["measure"] == "direct"]
    assert {x["probe"] for x in direct} == {"A-X", "A-Y"}
    for x in direct:
        assert x["verdict"] == "exceeds"
        # the direct p-p: the closed-form 1X p-p and the runout (1 um) and noise on top;
        # sampled at 18 points a revolution (p-p low by at most 1 - cos(pi/18) = 1.5 %)
        assert x["value"] == pytest.approx(_top_pp_um(), rel=0.12)
    # the sweep's top-speed window is no hold: reference only there as well
    assert all(x["verdict"] == "reference only" for x in _rule_rows(f)
               if x["where"] != "steady hold")
    assert f["run_verdict"] == "fail"


# the peak of the unbalance response: 2 e / (2 zeta sqrt(1 - zeta^2)) um p-p at
# r = 1/sqrt(1 - 2 zeta^2) (Thomson and Dahleh, 5th ed., sec. 3.3): 150.8 um p-p
PEAK_PP_UM = 2 * E_UM / (2 * ZETA * math.sqrt(1 - ZETA ** 2))


@pytest.mark.parametrize("trip, verdict, status", [(200.0, "pass", "above alert"),
                                                   (140.0, "fail", "exceeds")])
def test_site_levels_govern_a_field_run(db, tmp_path, trip, verdict, status):
    levels = (f'\n[[levels]]\nbearing = "A"\nmeasure = "direct"\nalert = 100.0\n'
              f'trip = {trip}\nsource = "site standing order SO-7 (invented for the test)"\n')
    f = _run(db, tmp_path, f"site-{trip:.0f}", hold_s=20.0, test_kind="field", levels=levels)
    site = [x for x in f["limits"] if x["limit_id"] == "site-levels"]
    band = [x for x in site if x["where"] == "critical band"]
    assert {x["probe"] for x in band} == {"A-X", "A-Y"}
    for x in band:
        # the direct p-p through the critical: the closed-form peak, the 1 um runout and
        # the noise on top (1X read per revolution, 5 %)
        assert x["value"] == pytest.approx(PEAK_PP_UM, rel=0.05)
        assert x["verdict"] == status and x["source"].startswith("site standing order")
        assert "alarm" not in x["basis"]
    # at the top speed the level (31.6 um p-p) is below both: within
    assert all(x["verdict"] == "within" for x in site if x["where"] == "top speed")
    # the ISO zones of the direct level are then a reference (the site levels govern)
    assert all(x["verdict"] == "reference only" for x in f["limits"]
               if x["limit_id"] == "iso-shaft-zones" and x["measure"] == "direct")
    assert f["run_verdict"] == verdict
    if status == "above alert":
        assert any(w.startswith("site alert level exceeded") for w in f["warnings"])
    assert f["site_levels"][0]["source"].startswith("site standing order")
