"""The orbit uses the once-per-rev sensor's angle: probe angles count from the sensor,
the sensor's from top dead centre (rundash.conventions); the screen is the machine viewed
from the driver end with top dead centre at the top."""

from __future__ import annotations

import numpy as np
import pytest

from rundash import figures
from tests.test_figures import arr


def _orbit(tach_angle_deg, rotation="ccw"):
    # a purely horizontal 1X motion u = A cos(wt), A = 10 um peak (20 um pp). With the
    # sensor at 90° L of the top (ccw: 90° in the direction of rotation) the probe at 0°
    # from the sensor points left (screen angle 180°) and reads d = -u = A cos(wt - 180°);
    # the probe at 90° from the sensor points down and reads nothing (plane geometry,
    # d = u cos b + v sin b; common practice, no source)
    x = {"name": "X", "angle_deg": 0.0, "amplitude": 20.0, "phase_lag_deg": 180.0}
    y = {"name": "Y", "angle_deg": 90.0, "amplitude": 0.0, "phase_lag_deg": 0.0}
    fig = figures.orbit(x, y, rotation=rotation, tach_angle_deg=tach_angle_deg)
    d = fig.to_dict()
    tr = next(t for t in d["data"] if t.get("meta") == "data")
    return arr(tr["x"]), arr(tr["y"]), d


def test_sensor_angle_turns_the_orbit():
    u, v, d = _orbit(90.0)
    assert np.max(np.abs(u)) == pytest.approx(10.0, rel=1e-9)
    assert np.max(np.abs(v)) == pytest.approx(0.0, abs=1e-9)
    assert u[0] == pytest.approx(10.0, rel=1e-9)  # at the event the shaft is to the right
    assert "once-per-rev sensor at 90° L" in " ".join(a["text"] for a in d["layout"]["annotations"])
    # the same readings with the sensor at the top: the probe points up, the motion is
    # vertical (what the orbit drew before it used the sensor's angle)
    u0, v0, _ = _orbit(0.0)
    assert np.max(np.abs(v0)) == pytest.approx(10.0, rel=1e-9)
    assert np.max(np.abs(u0)) == pytest.approx(0.0, abs=1e-9)


def test_sensor_marked_on_the_plot():
    _, _, d = _orbit(90.0)
    s = next(t for t in d["data"] if t.get("meta") == "sensor")
    # screen angle 180°: on the left edge
    assert arr(s["x"])[0] < 0 and abs(arr(s["y"])[0]) < 1e-9
    assert s["hovertext"] == "once-per-rev sensor, 90° L"
    _, _, d = _orbit(90.0, rotation="cw")
    s = next(t for t in d["data"] if t.get("meta") == "sensor")
    assert arr(s["x"])[0] > 0 and s["hovertext"] == "once-per-rev sensor, 90° R"
