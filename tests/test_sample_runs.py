"""The demo scenario in sample_runs/: files match the manifest, regeneration is
deterministic, and the ground truth agrees with checks made here independently of the
generator (eigen-solutions built from the stored parameters, the separation-margin rule,
a demodulation of the recorded signals)."""

from __future__ import annotations

import ast
import hashlib
import importlib.util
import json
import sys
import tomllib
from datetime import datetime
from pathlib import Path

import numpy as np
import pytest
import scipy.io.wavfile
import scipy.linalg
from numpy.testing import assert_allclose

FOLDER = Path(__file__).resolve().parents[1] / "sample_runs"
SCENARIO = json.loads((FOLDER / "scenario.json").read_text(encoding="utf-8"))
MANIFEST = tomllib.loads((FOLDER / "runs.toml").read_text(encoding="utf-8"))
MACHINE = tomllib.loads((FOLDER / SCENARIO["machine_file"]).read_text(encoding="utf-8"))
MAX_BYTES = 10_000_000


def _generator():
    name = "_sample_runs_generate"
    if name not in sys.modules:
        spec = importlib.util.spec_from_file_location(name, FOLDER / "generate.py")
        mod = importlib.util.module_from_spec(spec)
        sys.modules[name] = mod
        spec.loader.exec_module(mod)
    return sys.modules[name]


def _read(file):
    fs, data = scipy.io.wavfile.read(FOLDER / file)
    return fs, data


def _volts(data):
    return data.astype(float) / 32768.0 * SCENARIO["full_scale_v"]


def _run_id(file):
    return next(k for k, v in SCENARIO["runs"].items() if v["file"] == file)


class TestFiles:
    def test_manifest_lists_the_scenario(self):
        runs = MANIFEST["runs"]
        assert len(runs) >= 4
        assert len({r["cycle"] for r in runs}) == 2
        assert {r["kind"] for r in runs} == {"run-up", "coast-down"}
        assert MANIFEST["machine"] == SCENARIO["machine_file"]
        for r in runs:
            assert set(r) - {"test_kind"} == {"file", "label", "cycle", "started_at", "kind",
                                              "notes"}
            assert r.get("test_kind", "field") in ("field", "shop-test", "trip-test")
            assert r["started_at"].endswith("Z")
            datetime.fromisoformat(r["started_at"].replace("Z", "+00:00"))
        starts = [r["started_at"] for r in runs]
        assert starts == sorted(starts)

    @pytest.mark.parametrize("entry", MANIFEST["runs"], ids=lambda e: e["file"])
    def test_wav_matches_manifest_and_truth(self, entry):
        fs, data = _read(entry["file"])
        truth = SCENARIO["runs"][_run_id(entry["file"])]
        assert fs == SCENARIO["sample_rate_hz"]
        assert data.dtype == np.int16
        assert data.shape[1] == 1 + len(MACHINE["probes"])
        assert_allclose(data.shape[0] / fs, truth["duration_s"], atol=0.5 / fs)
        assert 40.0 <= data.shape[0] / fs <= 70.0
        assert truth["kind"] == entry["kind"] and truth["cycle"] == entry["cycle"]
        # nothing clipped at PCM full scale
        assert data.min() > -32768 and data.max() < 32767
        # the committed samples are the ones the ground truth was written with
        assert hashlib.sha256(data.tobytes()).hexdigest() == SCENARIO["pcm_sha256"][entry["file"]]

    def test_total_size(self):
        total = sum(p.stat().st_size for p in FOLDER.iterdir()
                    if p.is_file() and p.suffix in {".wav", ".toml", ".json", ".md", ".py"})
        assert total <= MAX_BYTES

    def test_machine_description_schema(self):
        m = MACHINE["machine"]
        assert m["kind"] == "compressor"
        for key in ("name", "rated_speed_rpm", "min_operating_speed_rpm", "max_continuous_speed_rpm"):
            assert key in m
        assert m["min_operating_speed_rpm"] < m["rated_speed_rpm"] < m["max_continuous_speed_rpm"] \
            < m["trip_speed_rpm"]
        assert MACHINE["tach"]["column"] == "ch1" and MACHINE["tach"]["edge"] == "falling"
        cols = [p["column"] for p in MACHINE["probes"]]
        assert cols == [f"ch{i}" for i in range(2, 2 + len(cols))]
        names = {p["name"]: p for p in MACHINE["probes"]}
        assert len(names) == len(cols)
        for p in MACHINE["probes"]:
            if "pair" in p:
                assert names[p["pair"]]["pair"] == p["name"]
                assert {p["axis"], names[p["pair"]]["axis"]} == {"X", "Y"}
            units = {"proximity": {"um", "mil", "mm"}, "velocity": {"mm/s", "in/s"}}[p["kind"]]
            assert p["units"] in units
        assert MACHINE["data"] == {"format": "wav", "full_scale_v": SCENARIO["full_scale_v"],
                                   "signal_units": "V"}


class TestGenerator:
    def test_stands_alone(self):
        tree = ast.parse((FOLDER / "generate.py").read_text(encoding="utf-8"))
        roots = set()
        for node in ast.walk(tree):
            if isinstance(node, ast.Import):
                roots |= {a.name.split(".")[0] for a in node.names}
            elif isinstance(node, ast.ImportFrom):
                roots.add((node.module or "").split(".")[0])
        assert roots <= {"__future__", "argparse", "hashlib", "json", "dataclasses", "pathlib",
                         "numpy", "scipy"}

    def test_regenerating_one_run_is_deterministic(self, tmp_path):
        gen = _generator()
        assert gen.main(["--out", str(tmp_path), "--only", "2023_down"]) == 0
        fs_new, new = scipy.io.wavfile.read(tmp_path / "k410_2023_down.wav")
        fs_old, old = _read("k410_2023_down.wav")
        assert fs_new == fs_old and new.shape == old.shape
        # same seed, same arithmetic: identical samples on this platform; a different BLAS
        # may round a handful of samples the other way, never by more than 1 LSB
        diff = np.abs(new.astype(int) - old.astype(int))
        assert diff.max() <= 1
        assert np.count_nonzero(diff) <= 1e-4 * diff.size


def _mck(p, direction):
    """M and K of the rotor-bearing-pedestal model, built here from the stored
    parameters (rigid rotor on two springs in series with housing masses and pedestals;
    the standard rigid-rotor model, e.g. Vance, Rotordynamics of Turbomachinery, 1988,
    ch. 2; from memory)."""
    kb = p[f"kb_{direction.lower()}_n_m"]
    kp = p[f"kp_{direction.lower()}_n_m"]
    a, b = p["a_m"], p["b_m"]
    K = np.array([
        [2 * kb, kb * (b - a), -kb, -kb],
        [kb * (b - a), kb * (a * a + b * b), kb * a, -kb * b],
        [-kb, kb * a, kb + kp, 0.0],
        [-kb, -kb * b, 0.0, kb + kp],
    ])
    M = np.diag([p["m_kg"], p["it_kg_m2"], p["mh_kg"], p["mh_kg"]])
    C = np.array([[2, 0, -1, -1], [0, a * a + b * b, a, -b], [-1, a, 1, 0], [-1, -b, 0, 1.0]])
    C = p["cb_n_s_m"] * C + np.diag([0, 0, p["cp_n_s_m"], p["cp_n_s_m"]])
    C[0, 1] = C[1, 0] = p["cb_n_s_m"] * (b - a)
    return M, C, K


CYCLE_OF_RUN = {rid: r["cycle"] for rid, r in SCENARIO["runs"].items()}


class TestGroundTruth:
    @pytest.mark.parametrize("rid", list(SCENARIO["runs"]))
    @pytest.mark.parametrize("direction", ["X", "Y"])
    def test_natural_frequencies(self, rid, direction):
        p = SCENARIO["cycles"][CYCLE_OF_RUN[rid]]
        M, C, K = _mck(p, direction)
        modes = SCENARIO["runs"][rid]["modes"][direction]
        undamped = np.array([m["undamped_rpm"] for m in modes])
        # reference library: scipy.linalg.eigh on the generalized problem K v = w^2 M v
        w2 = scipy.linalg.eigh(K, M, eigvals_only=True)
        assert_allclose(undamped, np.sqrt(w2) * 30 / np.pi, rtol=1e-9)
        # closed form: the eigenvalues of M^-1 K sum to its trace and multiply to
        # det K / det M (linear algebra, e.g. G. Strang, Introduction to Linear Algebra;
        # from memory)
        w2_json = (undamped * np.pi / 30) ** 2
        assert_allclose(w2_json.sum(), np.sum(np.diag(K) / np.diag(M)), rtol=1e-9)
        assert_allclose(np.prod(w2_json), np.linalg.det(K) / np.prod(np.diag(M)), rtol=1e-8)
        # damped: roots of det(K + s C + s^2 M) = 0 in first-order form
        A = np.block([[np.zeros((4, 4)), np.eye(4)],
                      [-np.linalg.solve(M, K), -np.linalg.solve(M, C)]])
        lam = scipy.linalg.eigvals(A)
        lam = lam[lam.imag > 0]
        lam = lam[np.argsort(np.abs(lam))]
        assert_allclose([m["damped_rpm"] for m in modes], lam.imag * 30 / np.pi, rtol=1e-8)
        assert_allclose([m["damping_ratio"] for m in modes], -lam.real / np.abs(lam), rtol=1e-8)
        # first mode cylindrical (journals in phase), second conical (in opposition)
        assert [m["journal_phase_de_nde_deg"] for m in modes[:2]] == [0.0, 180.0]

    def test_steady_peak_agrees_with_independent_frequency_response(self):
        """Peak, lag and AF of one probe from a frequency response solved here:
        (K - w^2 M + i w C) q = u w^2 e^{i(beta - alpha)} [1, s, 0, 0] (steady-state
        unbalance response, common practice, no source); AF by the half-power rule of
        the design notes (API 684 style, from memory)."""
        rid = "2023_up"
        p = SCENARIO["cycles"][CYCLE_OF_RUN[rid]]
        M, C, K = _mck(p, "X")
        alpha = np.radians(SCENARIO["probe_angles_deg"]["X"])
        n = np.arange(2500.0, 4500.0, 0.5)
        resp = []
        for w in n * np.pi / 30:
            F = np.zeros(4, complex)
            for u in p["unbalance"]:
                F[:2] += u["u_kg_m"] * w * w * np.exp(1j * (np.radians(u["beta_deg"]) - alpha)) \
                    * np.array([1.0, u["s_m"]])
            q = np.linalg.solve(K - w * w * M + 1j * w * C, F)
            resp.append(q[0] - p["a_m"] * q[1] - q[2])  # DE journal minus DE housing
        amp = 2e6 * np.abs(resp)
        i = int(np.argmax(amp))
        pk = SCENARIO["runs"][rid]["probes"]["K410-DE-X"]["peaks"][0]
        assert_allclose(n[i], pk["peak_rpm"], atol=0.5)  # grid step
        assert_allclose(amp[i], pk["peak_amplitude"], rtol=1e-4)
        lag = np.mod(-np.degrees(np.angle(resp[i])), 360)
        assert_allclose(lag, pk["lag_at_peak_deg"], atol=0.3)
        half = amp > amp[i] / np.sqrt(2)
        n1, n2 = n[half][0], n[half][-1]
        assert_allclose(n[i] / (n2 - n1), pk["af_half_power"], rtol=5e-3)  # 0.5 rpm grid

    def test_story_between_cycles(self):
        """What the README tells: first critical down 3-4 %, AF up from about 6 to about 9."""
        a, b = SCENARIO["runs"]["2023_up"]["probes"], SCENARIO["runs"]["2025_up"]["probes"]
        for probe in ("K410-DE-X", "K410-DE-Y"):
            pa, pb = a[probe]["peaks"][0], b[probe]["peaks"][0]
            assert -0.04 <= pb["peak_rpm"] / pa["peak_rpm"] - 1 <= -0.03
            assert 5.0 <= pa["af_half_power"] <= 7.0
            assert 8.0 <= pb["af_half_power"] <= 10.0
            assert pa["half_power_within_run"] and pb["half_power_within_run"]
        assert any(r["kind"] == "coast-down" for r in SCENARIO["runs"].values())

    def test_separation_margins(self):
        """API 617-style rule as written in the project's design notes (from memory, not
        checked against the standard): below N_min SM >= min(16, 17 (1 - 1/(AF - 1.5))) %,
        above N_mc SM >= min(26, 10 + 17 (1 - 1/(AF - 1.5))) %, no margin for AF < 2.5."""
        m = MACHINE["machine"]
        nmin, nmc = m["min_operating_speed_rpm"], m["max_continuous_speed_rpm"]

        def verdict(pk):
            nc, af = pk["peak_rpm"], pk["af_half_power"]
            if af < 2.5:
                return True
            if nc < nmin:
                return 100 * (nmin - nc) / nmin >= min(16.0, 17 * (1 - 1 / (af - 1.5)))
            return 100 * (nc - nmc) / nmc >= min(26.0, 10 + 17 * (1 - 1 / (af - 1.5)))

        for rid in ("2023_up", "2025_up"):
            for probe in ("K410-DE-X", "K410-DE-Y"):
                assert verdict(SCENARIO["runs"][rid]["probes"][probe]["peaks"][0])
        second_a = SCENARIO["runs"]["2023_up"]["probes"]["K410-DE-X"]["peaks"][1]
        second_b = SCENARIO["runs"]["2025_up"]["probes"]["K410-DE-X"]["peaks"][1]
        assert verdict(second_a) and not verdict(second_b)
        assert not second_b["peak_within_run"]

    def test_vibration_at_mcs_against_the_limit(self):
        """Unfiltered p-p limit min(25.4, 25.4 sqrt(12000/N_mc)) um (API 617 mechanical
        run test style, from memory): the 2023 rotor is below it, the 2025 rotor above."""
        nmc = MACHINE["machine"]["max_continuous_speed_rpm"]
        limit = min(25.4, 25.4 * np.sqrt(12000.0 / nmc))
        worst = {rid: max(SCENARIO["runs"][rid]["top_speed_1x"][p]["amplitude"]
                          for p in ("K410-NDE-X", "K410-NDE-Y")) for rid in ("2023_up", "2025_up")}
        assert worst["2023_up"] < limit - 3.0  # room for runout harmonics and noise in direct p-p
        assert worst["2025_up"] > limit + 3.0

    def test_sweep_through_peaks_is_reported(self):
        for rid, run in SCENARIO["runs"].items():
            rates = [s["rate_rpm_s"] for s in run["sweep_through_peaks"]]
            assert rates, rid
            sign = 1 if run["kind"] == "run-up" else -1
            assert all(80 <= sign * r <= 250 for r in rates)


def _events(tach, fs, level):
    """Falling crossings of ``level``, linearly interpolated (seconds)."""
    i = np.nonzero((tach[:-1] > level) & (tach[1:] <= level))[0]
    return (i + (level - tach[i]) / (tach[i + 1] - tach[i])) / fs


def _vector(t, x, events):
    """1X phasor (x = Re(c e^{i theta})) with theta linear between once-per-rev events."""
    m = (t >= events[0]) & (t < events[-1])
    theta = 2 * np.pi * np.interp(t[m], events, np.arange(len(events)))
    xs = x[m] - x[m].mean()
    return 2 * np.mean(xs * np.exp(-1j * theta))


class TestSignals:
    """The recorded signals carry the declared vectors (demodulated here at constant speed;
    synchronous averaging over whole revolutions, common practice, no source)."""

    def test_top_speed_and_slow_roll_vectors(self):
        file = "k410_2023_up.wav"
        fs, data = _read(file)
        v = _volts(data)
        t = np.arange(len(v)) / fs
        truth = SCENARIO["runs"][_run_id(file)]
        for window, key in (((t[-1] - 2.0, t[-1]), "top"), ((0.2, 5.0), "slow")):
            sel = (t >= window[0]) & (t <= window[1])
            level = np.median(v[sel, 0]) - 2.0  # half of the 4 V notch depth below the gap
            ev = _events(v[sel, 0], fs, level) + window[0]
            for probe in MACHINE["probes"]:
                col = int(probe["column"][2:]) - 1
                c = _vector(t[sel], v[sel, col] / (probe["sensitivity_mv_per_unit"] / 1000), ev)
                f = 2.0 if probe["kind"] == "proximity" else 1.0
                if key == "top":
                    want = truth["top_speed_1x"][probe["name"]]
                    # gap drift of ~0.1 V against a fixed level moves the event < 1 deg
                    assert_allclose(f * abs(c), want["amplitude"], rtol=0.01)
                    assert_allclose(np.mod(-np.degrees(np.angle(c)) - want["lag_deg"] + 180, 360) - 180,
                                    0.0, atol=1.0)
                elif probe["kind"] == "proximity":
                    want = truth["runout"][probe["name"]]
                    dyn = truth["probes"][probe["name"]]["dynamic_amplitude_at_300_rpm"]
                    assert_allclose(f * abs(c), want["1x_um_pp"], atol=dyn + 0.1)
                    assert_allclose(np.mod(-np.degrees(np.angle(c)) - want["1x_lag_deg"] + 180, 360) - 180,
                                    0.0, atol=np.degrees((dyn + 0.1) / want["1x_um_pp"]) + 1.0)

    def test_tach_edge_resolved_at_top_speed(self):
        """At least 2.5 samples on average inside the 10-90 % part of each falling edge at
        the highest speed of the scenario (trip speed)."""
        file = "k410_2025_trip.wav"
        fs, data = _read(file)
        v = _volts(data[: int(1.5 * fs), 0])
        base = np.median(v)
        depth = base - v.min()
        hi, lo = base - 0.1 * depth, base - 0.9 * depth
        t_hi, t_lo = _events(v, fs, hi), _events(v, fs, lo)
        n = min(len(t_hi), len(t_lo))
        assert n > 100
        width = (t_lo[:n] - t_hi[:n]) * fs
        assert width.mean() >= 2.5
        assert_allclose(len(t_hi) / 1.5 * 60, 6000.0, rtol=0.01)
