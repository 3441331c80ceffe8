"""Corpus cases of numbers outside physical ranges (``rundash/ingest/bounds.py``): a sample
period written where the rate belongs, a rate in the wrong unit. Written with numpy, h5py,
pyarrow and hand-packed RIFF headers; :func:`build` in make_corpus adds them."""

from __future__ import annotations

from pathlib import Path

from tests.badinput.make_corpus import (
    Case, signals, wav_bytes, wav_frames, write_hdf5, write_parquet,
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
    return out
