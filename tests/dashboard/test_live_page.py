"""The live page while a replay at x10 records a run with a known critical: polled in
headless Chromium (dash's ``dash_duo``); page logic without a browser too."""

from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from rundash.dashboard import ids
from rundash.dashboard.app import create_app
from rundash.dashboard.pages import live as live_page
from rundash.ingest.machine_file import load_machine_description
from rundash.ingest.sources import ReplaySource
from rundash.workflows.live import LiveParams, WarningSettings, record_live
from rundash.storage import live_queries as lq
from rundash.storage.engine import open_database
from tests import live_synth
from tests.dashboard.conftest import ARTIFACTS
from tests.test_figures import arr

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture
def live_db(tmp_path):
    mfile = tmp_path / "machine.toml"
    mfile.write_text(live_synth.MACHINE, encoding="utf-8")
    desc, text = load_machine_description(mfile)
    db = open_database(str(tmp_path / "live.sqlite"), create=True)
    earlier = tmp_path / "earlier.wav"
    live_synth.write_run(earlier, [0, 50], [600, 5600], seed=11)
    res = record_live(db, desc, ReplaySource(earlier, desc.data, speed=0), description_text=text)
    assert res.processed
    hold = tmp_path / "hold.wav"  # up at 100 rpm/s, 30 s hold at 3000 rpm, on up
    live_synth.write_run(hold, [0, 24, 54, 80], [600, 3000, 3000, 5600], seed=12)
    yield db, desc, text, hold
    db.dispose()


def _params():
    return LiveParams(warnings=WarningSettings(lead_time_s=10.0, dwell_limit_s=8.0),
                      alarms={}, process_at_end=True)


def test_page_logic_without_a_browser(live_db):
    db, desc, text, hold = live_db
    res = record_live(db, desc, ReplaySource(hold, desc.data, speed=0), description_text=text,
                      params=_params())
    snap = live_page.snapshot(db, None)
    assert snap["run_id"] == res.run_id  # /live shows the run recorded last
    assert len(snap["bands"]) == 1 and snap["status"].state == "ended"
    bode, polar = live_page.figures(snap)
    d = bode.to_dict()
    assert len(d["layout"]["shapes"]) == 2  # the expected band on both Bode panels
    x = arr(d["data"][0]["x"])
    assert x.size == snap["tracks"][0].speed_rpm.size
    assert live_page.active_alerts(snap["events"]) == []  # everything cleared at the end
    assert live_page.match("/live/7") == {"run_id": 7} and live_page.match("/x") is None


def test_replay_x10_while_the_page_polls(dash_duo, live_db, monkeypatch):
    db, desc, text, hold = live_db
    # x10 passes the 10 s approach warning in 1 s of wall time: poll faster than 1 s (x20
    # left a loaded CI machine too little wall time to see the recording state)
    monkeypatch.setattr(live_page, "POLL_MS", 250)
    app = create_app(db)
    dash_duo.start_server(app)
    dash_duo.wait_for_page(url=f"{dash_duo.server_url}/live", timeout=20)
    dash_duo.wait_for_element(f"#{ids.LIVE_STATUS}", timeout=20)
    # the recorder in its own process, as on site: the page only reads the database
    mfile = hold.parent / "machine.toml"
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    proc = subprocess.Popen(
        [sys.executable, "-m", "rundash.cli", "record", "--db", db.engine.url.database,
         "--machine", str(mfile), "--source", f"replay:{hold}@10", "--lead-time", "10",
         "--dwell-limit", "8"], cwd=str(hold.parent), env=env, stdout=subprocess.PIPE,
        stderr=subprocess.PIPE, text=True)
    polls: list[tuple[str, str, str]] = []  # (status, alert strip, event log) per look
    js = "return document.getElementById('%s').innerText;"
    deadline = time.monotonic() + 90
    while proc.poll() is None and time.monotonic() < deadline:
        polls.append(tuple(dash_duo.driver.execute_script(js % i)
                           for i in (ids.LIVE_STATUS, ids.LIVE_ALERTS, ids.LIVE_EVENTS)))
        time.sleep(0.05)
    stdout, stderr = proc.communicate(timeout=60)
    assert proc.returncode == 0, stderr
    assert "locked" not in stderr
    run_id = int(stdout.strip().splitlines()[-1])
    dash_duo.wait_for_contains_text(f"#{ids.LIVE_EVENTS}", "run processed", timeout=20)
    ARTIFACTS.mkdir(exist_ok=True)
    dash_duo.driver.save_screenshot(str(ARTIFACTS / "live-page.png"))
    # while the run was being recorded the page showed it building up: its status said
    # recording, the approach warning was in the log before the recording ended, and the
    # alert strip showed a warning about the critical band
    live = [p for p in polls if f"run {run_id} · recording" in p[0]]
    assert live, polls[-3:]
    assert any("approaching" in p[2] and "recording ended" not in p[2] for p in live)
    assert any("critical" in p[1] for p in live)
    # the event log on the page, newest first: reversed, the warnings in physical order,
    # at the speeds the constant-acceleration kinematics give (lead 10 s at 100 rpm/s)
    rows = dash_duo.driver.execute_script(
        f"return Array.from(document.querySelectorAll('#{ids.LIVE_EVENTS} tr'))"
        ".map(r => r.innerText);")[1:]
    rows.reverse()
    keys = ("approaching", "entered the expected", "dwelling", "left the critical")
    order = [k for r in rows for k in keys if k in r]
    assert order == list(keys)
    (lo, _, hi), = live_page.snapshot(db, run_id)["bands"]
    speed = {k: float(next(r for r in rows if k in r).split()[1].replace(",", ""))
             for k in keys}
    assert lo - 10 * 100 - 60 <= speed["approaching"] < lo
    assert lo <= speed["entered the expected"] <= lo + 60
    assert lo <= speed["dwelling"] <= hi
    assert hi <= speed["left the critical"] <= hi + 60
    # the page's Bode shows every live 1X vector of the database
    with db.read() as conn:
        n_db = lq.load_live_tracks(conn, run_id, order=1.0)[0].time_s.size
    n_page = dash_duo.driver.execute_script(
        f"return document.querySelector('#{ids.LIVE_BODE} .js-plotly-plot')._fullData[0].x.length;")
    assert n_page == n_db
    logs = dash_duo.get_logs() or []
    assert not [e for e in logs if e.get("level") == "SEVERE"]
    assert not any("locked" in str(e) for e in logs)


# ----------------------------------------------------------------------------- per unit
VEL_SENS_V_PER_MM_S = 4e-3  # 4 mV per mm/s (our choice for the fixture)
MIXED_MACHINE = live_synth.MACHINE.replace(
    'profile = "api617"', 'profile = "api617"\nrotation = "cw"').replace(
    "[data]", '[[probes]]\nname = "A-VEL"\ncolumn = "ch4"\nkind = "velocity"\n'
              'units = "mm/s"\nsensitivity_mv_per_unit = 4.0\n\n[data]')


def _write_mixed_run(path, knots_t, knots_rpm, *, fs=4096.0, seed=0):
    """The 3-channel live run plus a velocity channel: the time derivative of the A-Y
    response, v = d/dt Re(h exp(j 2 pi theta)) (SDOF closed form, see tests/live_synth)."""
    from scipy.io import wavfile

    rpm, theta = live_synth.rpm_profile(knots_t, knots_rpm)
    t = np.arange(int(float(knots_t[-1]) * fs)) / fs
    th = theta(t)
    h = live_synth.response_um(rpm(t))
    rng = np.random.default_rng(seed)
    x = np.real(h * np.exp(2j * np.pi * th)) + 0.2 * rng.standard_normal(t.size)
    z = h * np.exp(2j * np.pi * th - 0.5j * np.pi)
    y = np.real(z) + 0.2 * rng.standard_normal(t.size)
    w = 2 * np.pi * rpm(t) / 60.0
    v_mm_s = np.real(1j * w * z) * 1e-3  # um/s -> mm/s
    from tests import synth
    tach = synth.tach_waveform(th, ramp_rev=0.01)
    data = np.stack([tach, x * live_synth.SENS_V_PER_UM, y * live_synth.SENS_V_PER_UM,
                     v_mm_s * VEL_SENS_V_PER_MM_S]).T.astype(np.float32)
    wavfile.write(str(path), int(fs), data)


@pytest.fixture
def mixed_db(tmp_path):
    mfile = tmp_path / "machine.toml"
    mfile.write_text(MIXED_MACHINE, encoding="utf-8")
    desc, text = load_machine_description(mfile)
    db = open_database(str(tmp_path / "mixed.sqlite"), create=True)
    wav = tmp_path / "mixed.wav"
    _write_mixed_run(wav, [0, 40], [300, 5600], seed=5)
    res = record_live(db, desc, ReplaySource(wav, desc.data, speed=0), description_text=text,
                      params=LiveParams(process_at_end=False))
    yield db, res.run_id
    db.dispose()


_LAYOUT = "return document.querySelector('#%s .js-plotly-plot')._fullLayout.%s;"
_DATA = ("return document.querySelector('#%s .js-plotly-plot').data.map(t => "
         "[t.name, t.yaxis || 'y', (t.line || {}).color, t.meta]);")


def test_live_page_one_axis_per_unit(dash_duo, mixed_db):
    """A proximity pair and a velocity probe: µm pp and mm/s pk on their own axes, each
    probe one colour for amplitude and phase, the polar turned for a cw machine; an
    empty database shows a message, not empty axes."""
    db, run_id = mixed_db
    dash_duo.start_server(create_app(db))
    dash_duo.wait_for_page(url=f"{dash_duo.server_url}/live/{run_id}", timeout=20)
    dash_duo.wait_for_element(f"#{ids.LIVE_BODE} .js-plotly-plot", timeout=20)
    dash_duo.wait_for_contains_text(f"#{ids.LIVE_BODE} .ytitle", "µm pp", timeout=20)
    titles = [dash_duo.driver.execute_script(_LAYOUT % (ids.LIVE_BODE, f"{ax}.title.text"))
              for ax in ("yaxis", "yaxis2", "yaxis3")]
    assert titles == ["1X (µm pp)", "1X (mm/s pk)", "phase lag (deg)"]
    traces = dash_duo.driver.execute_script(_DATA % ids.LIVE_BODE)
    amp = {n: (ax, c) for n, ax, c, m in traces if m == "data"}
    lag = {n.removesuffix(" lag"): (ax, c) for n, ax, c, m in traces if m == "phase"}
    assert amp["A-X"][0] == "y" and amp["A-Y"][0] == "y" and amp["A-VEL"][0] == "y2"
    assert all(ax == "y3" for ax, _ in lag.values())
    assert {n: c for n, (_, c) in amp.items()} == {n: c for n, (_, c) in lag.items()}
    assert len({c for _, c in amp.values()}) == 3
    # the velocity 1X peak near the SDOF velocity peak: 2 pi (fn/60) e/(2 zeta) um/s,
    # 2 pi 50 Hz x 500 um = 157 mm/s at zeta 0.05 (closed form, tests/live_synth); 15 %
    # for the sweep through the resonance at 132 rpm/s and the 1X tracking window
    vmax = dash_duo.driver.execute_script(
        "const d = document.querySelector('#%s .js-plotly-plot')._fullData;"
        "return Math.max(...Array.from(d.find(t => t.name === 'A-VEL').y));" % ids.LIVE_BODE)
    assert 0.85 * 157.1 < vmax < 1.15 * 157.1
    assert dash_duo.driver.execute_script(
        _LAYOUT % (ids.LIVE_POLAR, "polar.angularaxis.direction")) == "counterclockwise"
    assert "µm pp" in dash_duo.driver.execute_script(_LAYOUT % (ids.LIVE_POLAR, "title.text"))
    strip = dash_duo.find_element(f"#{ids.LIVE_ALERTS} .alert")
    assert strip.value_of_css_property("border-left-width") == "4px"
    assert dash_duo.driver.title == f"Live monitor · run {run_id} · rundash"
    ARTIFACTS.mkdir(exist_ok=True)
    dash_duo.driver.save_screenshot(str(ARTIFACTS / "live-per-unit.png"))
    logs = dash_duo.get_logs() or []
    assert not [e for e in logs if e.get("level") == "SEVERE"]


def test_live_page_empty_state(dash_duo, tmp_path):
    empty = open_database(str(tmp_path / "empty.sqlite"), create=True)
    try:
        dash_duo.start_server(create_app(empty))
        dash_duo.wait_for_page(url=f"{dash_duo.server_url}/live", timeout=20)
        dash_duo.wait_for_contains_text(f"#{ids.LIVE_BODE}", "No run is being recorded",
                                        timeout=20)
        for fig in (ids.LIVE_BODE, ids.LIVE_POLAR):  # a message, no empty grey axes
            assert dash_duo.driver.execute_script(_LAYOUT % (fig, "xaxis.visible")) is False
            assert dash_duo.driver.execute_script(_LAYOUT % (fig, "yaxis.visible")) is False
        assert "no active warning" in dash_duo.find_element(f"#{ids.LIVE_ALERTS}").text
        ARTIFACTS.mkdir(exist_ok=True)
        dash_duo.driver.save_screenshot(str(ARTIFACTS / "live-empty.png"))
        logs = dash_duo.get_logs() or []
        assert not [e for e in logs if e.get("level") == "SEVERE"]
    finally:
        empty.dispose()
