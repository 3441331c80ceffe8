"""The live monitor's figures: one amplitude axis per unit, one colour per probe for its
amplitude and phase, phase blanked below the stated floor, the polar turned with the
machine's rotation, a message instead of empty axes."""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pytest

from rundash import figures
from rundash.figures.common import PHASE_FLOOR_FRACTION
from tests.test_figures import arr, sdof_unbalance


def live_track(name, kind, *, scale=10.0, n=800, offset_deg=0.0):
    rpm = np.linspace(300.0, 5500.0, n)
    amp, lag = sdof_unbalance(rpm, 3000.0, 0.1, scale_um_pp=scale)
    return SimpleNamespace(probe_name=name, kind=kind, speed_rpm=rpm, amplitude=amp,
                           phase_lag_deg=(lag + offset_deg) % 360.0)


def _data(fig):
    return fig.to_dict()["data"]


class TestLiveBode:
    def test_one_axis_per_unit_and_phase_below(self):
        bode, polar = figures.live_bode_polar(
            [live_track("A-X", "proximity"), live_track("A-VEL", "velocity", scale=2.0),
             live_track("A-Y", "proximity", offset_deg=90.0)])
        lay = bode.to_dict()["layout"]
        assert lay["yaxis"]["title"]["text"] == "1X (µm pp)"
        assert lay["yaxis2"]["title"]["text"] == "1X (mm/s pk)"
        assert lay["yaxis3"]["title"]["text"] == "phase lag (deg)"
        assert lay["yaxis3"]["range"] == [0, 360]
        amp = {t["name"]: t for t in _data(bode) if t["meta"] == "data"}
        assert amp["A-X"]["yaxis"] == "y" and amp["A-Y"]["yaxis"] == "y"
        assert amp["A-VEL"]["yaxis"] == "y2"
        # the panels do not overlap (one axis, one convention, one place)
        doms = [lay[a]["domain"] for a in ("yaxis", "yaxis2", "yaxis3")]
        assert doms[0][0] > doms[1][1] and doms[1][0] > doms[2][1]
        # the polar shows the first unit only, and says where the others are
        assert {t["name"] for t in _data(polar) if t["meta"] == "data"} == {"A-X", "A-Y"}
        assert "mm/s pk on the Bode only" in polar.to_dict()["layout"]["annotations"][0]["text"]

    def test_phase_and_amplitude_of_a_probe_share_a_colour(self):
        bode, polar = figures.live_bode_polar([live_track("A-X", "proximity"),
                                               live_track("A-Y", "proximity")])
        d = _data(bode)
        amp = {t["name"]: t["line"]["color"] for t in d if t["meta"] == "data"}
        lag = {t["name"].removesuffix(" lag"): t["line"]["color"] for t in d
               if t["meta"] == "phase"}
        pol = {t["name"]: t["line"]["color"] for t in _data(polar)}
        assert amp == lag == pol and len(set(amp.values())) == 2
        # one legend entry per probe toggles both of its traces
        groups = {t["legendgroup"] for t in d}
        assert groups == {"probe A-X", "probe A-Y"}

    def test_phase_blanked_below_the_floor(self):
        tr = live_track("A-X", "proximity")
        bode, _ = figures.live_bode_polar([tr])
        ph = next(t for t in _data(bode) if t["meta"] == "phase")
        x, y = arr(ph["x"]), arr(ph["y"])
        keep = np.isfinite(x)
        # closed-form amplitude (Thomson, 4th ed., sec. 3.3) against the stated floor
        weak = tr.amplitude < PHASE_FLOOR_FRACTION * tr.amplitude.max()
        assert weak.sum() > 10 and (~weak).sum() > 10
        assert np.isnan(y[keep][weak]).all() and np.isfinite(y[keep][~weak]).all()
        note = " ".join(a["text"] for a in bode.to_dict()["layout"]["annotations"])
        assert f"below {100 * PHASE_FLOOR_FRACTION:.0f} % of its peak" in note

    def test_wraps_are_gaps_not_vertical_lines(self):
        tr = live_track("A-X", "proximity", offset_deg=300.0)  # wraps mid-critical
        bode, _ = figures.live_bode_polar([tr])
        ph = next(t for t in _data(bode) if t["meta"] == "phase")
        y = arr(ph["y"])
        assert np.nanmax(np.abs(np.diff(y))) < 30.0 and np.isnan(arr(ph["x"])).sum() == 1

    @pytest.mark.parametrize("rotation, direction", [("ccw", "clockwise"),
                                                     ("cw", "counterclockwise")])
    def test_polar_turns_with_the_machine(self, rotation, direction):
        # the review page's convention: lag rises against the rotation (figures.polar)
        _, polar = figures.live_bode_polar([live_track("A-X", "proximity")], rotation=rotation)
        review = figures.polar([{"probe": "A-X", "order": 1.0, "direction": "run-up",
                                 "speed_rpm": np.linspace(300, 5500, 50),
                                 "amplitude": np.ones(50), "phase_lag_deg": np.zeros(50)}],
                               rotation=rotation)
        got = polar.to_dict()["layout"]["polar"]["angularaxis"]
        assert got["direction"] == direction
        assert got["direction"] == review.to_dict()["layout"]["polar"]["angularaxis"]["direction"]

    def test_bands_shaded_on_every_panel(self):
        bode, _ = figures.live_bode_polar(
            [live_track("A-X", "proximity"), live_track("A-VEL", "velocity")],
            bands=[(2700.0, 3000.0, 3300.0)])
        shapes = bode.to_dict()["layout"]["shapes"]
        assert sorted(s["yref"] for s in shapes) == ["y domain", "y2 domain", "y3 domain"]

    def test_empty_is_a_message_not_axes(self):
        bode, polar = figures.live_bode_polar([], empty_message="nothing yet")
        for fig in (bode, polar):
            lay = fig.to_dict()["layout"]
            assert lay["xaxis"]["visible"] is False and lay["yaxis"]["visible"] is False
            assert [a["text"] for a in lay["annotations"]] == ["nothing yet"]
            assert fig.to_dict()["data"] == []

    def test_imperial(self):
        bode, _ = figures.live_bode_polar([live_track("A-X", "proximity")], system="imperial")
        assert bode.to_dict()["layout"]["yaxis"]["title"]["text"] == "1X (mil pp)"
        y = arr(next(t for t in _data(bode) if t["meta"] == "data")["y"])
        # 1 mil = 25.4 um exactly (definition of the inch)
        assert np.nanmax(y) == pytest.approx(live_track("A-X", "proximity").amplitude.max()
                                             / 25.4, rel=1e-12)
