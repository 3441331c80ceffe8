"""One contract every reader passes, on files written by independent libraries
(pandas, scipy.io.wavfile, Python's wave module, h5py, pyarrow, asammdf)."""

from __future__ import annotations

import wave

import numpy as np
import pytest
from numpy.testing import assert_allclose

from rundash.errors import InputError
from rundash.ingest import open_reader
from rundash.model import DataSpec

FS = 2000.0
N = 70001  # not a multiple of any block size
NAMES = ("tach", "x1", "y1", "v1")


def _signals():
    rng = np.random.default_rng(7)
    t = np.arange(N) / FS
    x = np.vstack([np.where(np.mod(t * 20, 1) < 0.1, 2.0, -2.0),
                   0.5 * np.sin(2 * np.pi * 20 * t), 0.5 * np.cos(2 * np.pi * 20 * t),
                   0.1 * rng.standard_normal(N)])
    return t, x


def write_csv(tmp, t, x):
    import pandas as pd
    p = tmp / "rec.csv"
    pd.DataFrame({"time_s": t, **dict(zip(NAMES, x))}).to_csv(p, index=False, float_format="%.9g")
    return p, DataSpec(), NAMES, 1e-8


def write_wav16(tmp, t, x):
    from scipy.io import wavfile
    p = tmp / "rec16.wav"
    pcm = np.round(x.T / 4.0 * 32768).astype(np.int16)  # full scale 4 V
    wavfile.write(p, int(FS), pcm)
    return p, DataSpec(full_scale_v=4.0), ("ch1", "ch2", "ch3", "ch4"), 4.0 / 32768 * 0.51


def write_wav_float(tmp, t, x):
    from scipy.io import wavfile
    p = tmp / "recf.wav"
    wavfile.write(p, int(FS), (x.T / 4.0).astype(np.float32))
    return p, DataSpec(full_scale_v=4.0), ("ch1", "ch2", "ch3", "ch4"), 1e-6


def write_wav32(tmp, t, x):
    from scipy.io import wavfile
    p = tmp / "rec32.wav"
    wavfile.write(p, int(FS), np.round(x.T / 4.0 * 2**31).astype(np.int32))
    return p, DataSpec(full_scale_v=4.0), ("ch1", "ch2", "ch3", "ch4"), 1e-8


def write_wav24(tmp, t, x):
    p = tmp / "rec24.wav"
    v = np.ascontiguousarray(np.round(x.T / 4.0 * 2**23).astype("<i4"))
    raw = v.view(np.uint8).reshape(N, 4, 4)[:, :, :3].tobytes()
    with wave.open(str(p), "wb") as w:  # Python's own wave module writes the header
        w.setnchannels(4)
        w.setsampwidth(3)
        w.setframerate(int(FS))
        w.writeframes(raw)
    return p, DataSpec(full_scale_v=4.0), ("ch1", "ch2", "ch3", "ch4"), 4.0 / 2**23


def write_hdf5(tmp, t, x):
    import h5py
    p = tmp / "rec.h5"
    with h5py.File(p, "w") as f:
        g = f.create_group("run")
        g.attrs["sample_rate_hz"] = FS
        for n, s in zip(NAMES, x):
            g.create_dataset(n, data=s.astype(np.float32))
    # HDF5 lists a group's members by name, so that is the channel order
    return p, DataSpec(dataset="run"), tuple(sorted(NAMES)), 1e-6


def write_parquet(tmp, t, x):
    import pyarrow as pa
    import pyarrow.parquet as pq
    p = tmp / "rec.parquet"
    table = pa.table({"time_s": t, **{n: s for n, s in zip(NAMES, x)}})
    pq.write_table(table, p, row_group_size=30000)
    return p, DataSpec(), NAMES, 0.0


def write_mdf(tmp, t, x):
    from asammdf import MDF, Signal
    p = tmp / "rec.mf4"
    mdf = MDF(version="4.10")
    # two channel groups with their own time channels (same rate, same start)
    mdf.append([Signal(samples=s, timestamps=t, name=n, unit="V") for n, s in
                zip(NAMES[:2], x[:2])])
    mdf.append([Signal(samples=s, timestamps=t, name=n, unit="V") for n, s in
                zip(NAMES[2:], x[2:])])
    mdf.save(p, overwrite=True)
    mdf.close()
    return p, DataSpec(), NAMES, 0.0


WRITERS = [write_csv, write_wav16, write_wav24, write_wav32, write_wav_float, write_hdf5,
           write_parquet, write_mdf]


@pytest.mark.parametrize("writer", WRITERS, ids=lambda w: w.__name__[6:])
class TestReaderContract:
    def test_channels_rate_length_and_values(self, tmp_path, writer):
        t, x = _signals()
        path, spec, names, atol = writer(tmp_path, t, x)
        with open_reader(path, spec) as r:
            assert r.channels == names
            if names == tuple(sorted(NAMES)) and names != NAMES:
                x = x[[NAMES.index(n) for n in names]]
            assert_allclose(r.sample_rate_hz, FS, rtol=1e-9)
            blocks = list(r.blocks(8192))
            got = np.concatenate([b for b, _ in blocks], axis=1)
            assert got.shape == (4, N)
            assert all(b.shape[1] <= 8192 for b, _ in blocks)
            fracs = [f for _, f in blocks]
            assert fracs[-1] == pytest.approx(1.0, abs=0.02) or fracs[-1] == 0.0
            assert_allclose(got, x, atol=max(atol, 1e-300), rtol=1e-6 if atol else 0)

    def test_truncated_file_is_refused_or_read_partially_with_clear_error(self, tmp_path, writer):
        t, x = _signals()
        path, spec, names, _ = writer(tmp_path, t, x)
        data = path.read_bytes()
        cut = tmp_path / ("cut" + path.suffix)
        cut.write_bytes(data[: len(data) // 2 + 3])
        try:
            with open_reader(cut, spec) as r:
                for _ in r.blocks(8192):
                    pass
        except InputError as exc:
            assert cut.name in str(exc)
        else:
            # text formats cut mid-row end early; the cut row must then have been refused
            assert path.suffix == ".csv", "a cut binary file must be refused"

    def test_empty_file_is_refused(self, tmp_path, writer):
        t, x = _signals()
        path, spec, _, _ = writer(tmp_path, t, x)
        empty = tmp_path / ("empty" + path.suffix)
        empty.write_bytes(b"")
        with pytest.raises(InputError, match=f"{empty.name}: the file is empty"):
            open_reader(empty, spec)

    def test_garbage_with_valid_ending_is_refused(self, tmp_path, writer):
        t, x = _signals()
        path, spec, _, _ = writer(tmp_path, t, x)
        junk = tmp_path / ("junk" + path.suffix)
        junk.write_bytes(np.random.default_rng(1).integers(0, 256, 5000, dtype=np.uint8).tobytes())
        with pytest.raises(InputError, match=junk.name):
            with open_reader(junk, spec) as r:
                for _ in r.blocks(8192):
                    pass


class TestCsvSpecifics:
    def test_sample_rate_from_machine_file_without_time_column(self, tmp_path):
        p = tmp_path / "a.csv"
        p.write_text("tach,x1\n1,2\n3,4\n5,6\n", encoding="utf-8")
        with open_reader(p, DataSpec(sample_rate_hz=100.0)) as r:
            assert r.channels == ("tach", "x1") and r.sample_rate_hz == 100.0
            (b, _), = list(r.blocks())
        assert_allclose(b, [[1, 3, 5], [2, 4, 6]])

    def test_nan_names_channel_and_row(self, tmp_path):
        p = tmp_path / "a.csv"
        p.write_text("time_s,tach,x1\n0,1,2\n0.01,1,\n0.02,1,2\n", encoding="utf-8")
        with pytest.raises(InputError, match=r"a.csv: channel 'x1', row 3"):
            with open_reader(p) as r:
                list(r.blocks())

    def test_uneven_time_names_the_row(self, tmp_path):
        p = tmp_path / "a.csv"
        p.write_text("time_s,x\n0,1\n0.01,1\n0.02,1\n0.05,1\n0.06,1\n", encoding="utf-8")
        with pytest.raises(InputError, match=r"time column 'time_s', row 5"):
            open_reader(p)

    def test_no_rate_at_all_is_refused(self, tmp_path):
        p = tmp_path / "a.csv"
        p.write_text("tach,x1\n1,2\n", encoding="utf-8")
        with pytest.raises(InputError, match="no usable sample rate"):
            open_reader(p)

    def test_unknown_ending_is_refused(self, tmp_path):
        p = tmp_path / "a.dat"
        p.write_bytes(b"123")
        with pytest.raises(InputError, match=r"a.dat: cannot tell the format"):
            open_reader(p)
