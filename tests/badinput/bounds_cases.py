"""Corpus cases of numbers outside physical ranges (``rundash/ingest/bounds.py``) — a sample
period written where the rate belongs, a rate in the wrong unit, 1e20 pulses per
revolution — and of machine descriptions that name a profile that cannot be read: a typo,
a pipe, a device, a huge file (refused at import, not at processing). Written with numpy,
h5py, pyarrow, hand-packed RIFF headers and plain text; :func:`build` in make_corpus adds
them."""

from __future__ import annotations

import os
from pathlib import Path

from tests.badinput.make_corpus import (
    Case, machine_text, signals, wav_bytes, wav_frames, write_hdf5, write_parquet,
)

RATE_RANGE = r"expected a sample rate from 10 to 1e\+07 Hz"


def cases(root: Path) -> list[Case]:
    base = signals()
    out: list[Case] = []
    m_csv, m_wav = "machine.toml", "machine_wav.toml"

    def case(name, data, match, what, machine=m_csv):
        out.append(Case(name=name, data=data, machine=machine, expect="refused",
                        match=tuple(match), what=what))

    case("h5_rate_is_the_period", write_hdf5(root / "rate_period.h5", base,
                                             attrs={"sample_rate_hz": 1.0 / 25600}).name,
         [r"rate_period\.h5", "sample rate", RATE_RANGE, r"got 3\.90625e-05"],
         "the sample period (3.9e-5 s) written as the rate")
    case("h5_rate_terahertz", write_hdf5(root / "rate_huge.h5", base,
                                         attrs={"sample_rate_hz": 1e12}).name,
         [r"rate_huge\.h5", RATE_RANGE, r"got 1e\+12"], "1e12 Hz (a rate in the wrong unit)")
    case("pq_rate_terahertz", write_parquet(root / "rate_huge.parquet", base,
                                            names=("tach", "x1", "y1", "v1"),
                                            metadata={"sample_rate_hz": "1e12"}).name,
         [r"rate_huge\.parquet", RATE_RANGE, r"got 1e\+12"], "1e12 Hz in the metadata")
    (root / "rate_tiny.wav").write_bytes(wav_bytes(wav_frames(base), fs=5))
    case("wav_rate_5_hz", "rate_tiny.wav", [r"rate_tiny\.wav", RATE_RANGE, r"got 5"],
         "a WAV header saying 5 Hz", machine=m_wav)

    # ------------------------------------------------------------ machine description numbers
    def toml(name, old, new, match, what):
        text = machine_text()
        assert old in text, old
        (root / f"{name}.toml").write_text(text.replace(old, new, 1), encoding="utf-8")
        case(f"toml_{name}", "good.csv", [rf"{name}\.toml", *match], what,
             machine=f"{name}.toml")

    toml("pulses_1e20", "pulses_per_rev = 1", "pulses_per_rev = 100000000000000000000",
         [r"\[tach\]\.pulses_per_rev", "expected pulses per revolution from 1 to 4096, got "
          "100000000000000000000"], "1e20 pulses per revolution as a whole number")
    toml("pulses_float", "pulses_per_rev = 1", "pulses_per_rev = 1e20",
         [r"\[tach\]\.pulses_per_rev", "expected a whole number"], "1e20 as a float")
    toml("rate_period", "[data]\n", "[data]\nsample_rate_hz = 3.9e-5\n",
         [r"\[data\]\.sample_rate_hz", RATE_RANGE, r"got 3\.9e-05"],
         "the sample period declared as the rate")
    toml("rate_huge", "[data]\n", "[data]\nsample_rate_hz = 1e12\n",
         [r"\[data\]\.sample_rate_hz", RATE_RANGE, r"got 1e\+12"], "1e12 Hz declared")
    toml("speed_huge", "max_continuous_speed_rpm = 2900", "max_continuous_speed_rpm = 2.9e9",
         [r"\[machine\]\.max_continuous_speed_rpm",
          r"expected a shaft speed from 1 to 500000 rpm, got 2\.9e\+09"], "2.9e9 rpm")
    toml("sensitivity_huge", "sensitivity_mv_per_unit = 4.0", "sensitivity_mv_per_unit = 4e9",
         [r"sensitivity_mv_per_unit", r"expected a sensitivity from 0\.001 to 100000 mV per "
          r"unit, got 4e\+09"], "a sensitivity of 4e9 mV per unit")
    toml("angle", 'bearing = "DE"\naxis = "X"', 'bearing = "DE"\naxis = "X"\nangle_deg = 720',
         [r"angle_deg", r"expected an angle from -360 to 360 deg, got 720"], "a 720 deg angle")
    toml("hysteresis", 'edge = "rising"', 'edge = "rising"\nhysteresis = 1e300',
         [r"\[tach\]\.hysteresis", "expected a hysteresis"], "a hysteresis of 1e300")
    nested = "[" * 5000 + "]" * 5000
    toml("deep_nesting", 'profile = "fixed-margin"', f'profile = "fixed-margin"\n'
         f'description = {nested}', ["nested hundreds of levels deep"],
         "10 kB of nested arrays (the TOML reader's recursion)")

    # ------------------------------------------------------------ profiles, checked at import
    toml("profile_typo", 'profile = "fixed-margin"', 'profile = "fixed_margin"',
         [r"\[machine\]\.profile", "allowed 'api610', 'api612', 'api617', 'fixed-margin'",
          "got 'fixed_margin'"], "a misspelt profile name (was refused only at processing)")
    fifo = root / "pipe.toml"
    if not fifo.exists():
        os.mkfifo(fifo)
    toml("profile_fifo", 'profile = "fixed-margin"', f'profile = "{fifo.as_posix()}"',
         [r"\[machine\]\.profile", r"profile file 'pipe\.toml': not a regular file"],
         "a named pipe as profile (reading it hung)")
    toml("profile_device", 'profile = "fixed-margin"', 'profile = "/dev/zero"',
         [r"\[machine\]\.profile", r"'zero': not a regular file"],
         "/dev/zero as profile (reading it ran out of memory)")
    big = root / "big_profile.toml"
    big.write_text("# " + "x" * (1 << 20) + "\n", encoding="utf-8")
    toml("profile_huge", 'profile = "fixed-margin"', f'profile = "{big.as_posix()}"',
         [r"'big_profile\.toml': \d+ bytes, more than a profile file holds"],
         "a 1 MB profile file")
    deep = root / "deep_profile.toml"
    deep.write_text("name = " + nested + "\n", encoding="utf-8")
    toml("profile_nested", 'profile = "fixed-margin"', f'profile = "{deep.as_posix()}"',
         [r"'deep_profile\.toml': not a usable TOML file"], "a profile of nested arrays")
    return out
