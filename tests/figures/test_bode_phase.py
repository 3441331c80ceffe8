"""The review Bode's phase: blanked below the stated amplitude floor, wrapped without
vertical lines, the note saying what is drawn."""

from __future__ import annotations

import numpy as np

from rundash import figures
from rundash.figures.common import PHASE_FLOOR_FRACTION, blank_weak_phase, break_at_wraps
from tests.test_figures import arr, track


def _phase(fig):
    d = fig.to_dict()
    tr = [t for t in d["data"] if t.get("meta") == "data" and t["yaxis"] == "y2"][0]
    return arr(tr["x"]), arr(tr["y"]), d


def test_phase_blanked_where_the_amplitude_is_weak():
    tr = track()  # SDOF unbalance response, zeta 0.1 (Thomson, 4th ed., sec. 3.3)
    for phase in ("unwrapped", "wrapped"):
        x, y, d = _phase(figures.bode([tr], phase=phase))
        keep = np.isfinite(x)
        weak = tr["amplitude"] < PHASE_FLOOR_FRACTION * tr["amplitude"].max()
        assert weak.any() and np.isnan(y[keep][weak]).all()
        assert np.isfinite(y[keep][~weak]).all()
        notes = [a["text"] for a in d["layout"]["annotations"]
                 if a.get("name") == "phase-note"]
        assert len(notes) == 1 and "below 5 % of its peak" in notes[0]
    assert "lag 0–360°" in notes[0]
    _, _, d = _phase(figures.bode([tr]))
    note = next(a["text"] for a in d["layout"]["annotations"] if a.get("name") == "phase-note")
    assert "unwrapped: continued past 360°" in note


def test_floor_uses_the_peak_of_all_pieces():
    # a weak second piece is blanked against the strong first one's peak
    a, b = track(), track()
    b["amplitude"] = b["amplitude"] * 0.01
    x, y, _ = _phase(figures.bode([a, b]))
    gap = np.flatnonzero(np.isnan(x))[0]
    assert np.isnan(y[gap + 1:]).all() and np.isfinite(y[:gap]).any()


def test_helpers():
    ph = blank_weak_phase([10.0, 20.0, 30.0], [1.0, 0.04, 0.05])
    assert np.isnan(ph[1]) and ph[0] == 10.0 and ph[2] == 30.0  # 0.05 x peak 1.0 kept
    x, p = break_at_wraps([1.0, 2.0, 3.0, 4.0], [350.0, 355.0, 2.0, 8.0])
    assert np.isnan(x[2]) and np.isnan(p[2]) and x.size == 5
    x, p = break_at_wraps([1.0, 2.0], [10.0, 20.0])
    assert x.size == 2


def test_polar_speed_labels_of_several_runs_do_not_pile_up():
    # two runs of one probe, one 2.3 x the other (as the demo's two cycles): near the
    # centre their speed labels would sit on top of each other
    from tests.test_figures import track

    a, b = track(), track()
    b["amplitude"] = b["amplitude"] * 2.3
    a["probe"], b["probe"] = "run 1", "run 3"
    d = figures.polar([a, b]).to_dict()
    pts = []
    r_max = max(float(np.max(a["amplitude"])), float(np.max(b["amplitude"])))
    for t in d["data"]:
        if t.get("meta") == "labels":
            for r, th in zip(t["r"], t["theta"]):
                pts.append(r * np.exp(1j * np.radians(th)))
    assert len(pts) >= 5
    gaps = [abs(p - q) for i, p in enumerate(pts) for q in pts[i + 1:]]
    assert min(gaps) >= 0.08 * r_max  # the stated minimum gap (our display choice)


def test_close_critical_labels_do_not_overprint():
    from tests.test_figures import critical

    a, b = track(), track(probe="P-Y")
    d = figures.bode([a, b], criticals=[critical("P-X", 3500.0), critical("P-Y", 3520.0),
                                        critical("P-X", 4800.0)]).to_dict()
    crit = next(t for t in d["data"] if t.get("name") == "critical speeds")
    assert list(crit["textposition"]) == ["top left", "top right", "top center"]
