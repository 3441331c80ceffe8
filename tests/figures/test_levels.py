"""The direct-level plot: one amplitude convention per axis, limit legends in the
display system."""

from __future__ import annotations

import numpy as np
import pytest

from rundash import figures
from rundash.ingest.profile_file import load_profile
from tests.test_figures import arr, track


def _named(d, suffix):
    return next(t for t in d["data"] if t.get("name", "").endswith(suffix))


def test_velocity_1x_drawn_as_rms_on_the_rms_axis():
    tr = track()
    tr["direct"] = tr["amplitude"] / np.sqrt(2.0) * 1.05  # overall rms a little above 1X rms
    d = figures.direct_vs_filtered([tr], kind="velocity").to_dict()
    assert d["layout"]["yaxis"]["title"]["text"] == "amplitude (mm/s rms; 1X as rms)"
    one_x = _named(d, "1X (rms = pk/√2)")
    # a sinusoid of peak A has rms A/√2 (definition of rms; common practice, no source)
    assert np.allclose(arr(one_x["y"]), tr["amplitude"] / np.sqrt(2.0), rtol=1e-12)
    direct = _named(d, "direct")
    assert np.all(arr(one_x["y"]) <= arr(direct["y"]))  # never above the overall level


def test_proximity_both_pp():
    tr = track()
    d = figures.direct_vs_filtered([tr], kind="proximity").to_dict()
    assert d["layout"]["yaxis"]["title"]["text"] == "amplitude (µm pp)"
    assert np.allclose(arr(_named(d, "1X")["y"]), tr["amplitude"])


@pytest.mark.parametrize("system, unit, digits", [("metric", "µm pp", 1), ("imperial", "mil pp", 2)])
def test_limit_legend_follows_the_unit_system(system, unit, digits):
    lines = figures.guidance_lines(load_profile("api617"), kind="proximity",
                                   max_continuous_speed_rpm=5460.0,
                                   speed_range_rpm=(300.0, 6000.0))
    verdict = [ln for ln in lines if ln.get("value") is not None]
    assert verdict
    d = figures.direct_vs_filtered([track()], kind="proximity", system=system,
                                   limit_lines=verdict).to_dict()
    texts = [t.get("name", "") for t in d["data"]] + [a["text"] for a in d["layout"]["annotations"]]
    for ln in verdict:
        v = ln["value"] / (25.4 if system == "imperial" else 1.0)  # 1 mil = 25.4 µm exactly
        assert any(f"{ln['title']}: {v:.{digits}f} {unit}" in t for t in texts), texts
    if system == "imperial":
        assert not any("µm" in t for t in texts if "ISO zone" not in t)


def test_order_line_labels_not_clipped():
    rpm = np.linspace(300.0, 6000.0, 40)
    f = np.linspace(0.0, 500.0, 200)
    amp = np.ones((rpm.size, f.size))
    casc = figures.cascade(rpm, f, amp, orders=(1, 2, 3, 4)).to_dict()
    camp = figures.campbell(6000.0, orders=(1, 2, 3, 4)).to_dict()
    for d in (casc, camp):
        labels = [t for t in d["data"] if t.get("meta") == "order"]
        assert len(labels) == 4 and all(t["cliponaxis"] is False for t in labels)
