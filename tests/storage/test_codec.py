import numpy as np
from numpy.testing import assert_array_equal

from rundash.storage.codec import (decode_f32, decode_f64, encode_f32, encode_f64, f32_view,
                                   f64_view)
from rundash.storage import queries as q


class TestCodec:
    def test_f32_round_trip_is_bit_exact(self):
        rng = np.random.default_rng(1)
        x = rng.standard_normal(10001).astype(np.float32)
        x[:4] = [np.float32(1e-45), -0.0, np.finfo(np.float32).max, np.float32(1.5e-39)]
        y = decode_f32(encode_f32(x))
        assert_array_equal(x.view(np.uint32), y.view(np.uint32))

    def test_f64_round_trip_is_bit_exact(self):
        x = np.random.default_rng(2).standard_normal(999)
        assert_array_equal(x.view(np.uint64), decode_f64(encode_f64(x)).view(np.uint64))

    def test_views_hold_the_same_bytes_and_copy_only_other_dtypes(self):
        x32 = np.random.default_rng(4).standard_normal(777).astype(np.float32)
        x64 = x32.astype(np.float64)
        assert bytes(f32_view(x32)) == encode_f32(x32)
        assert bytes(f64_view(x64)) == encode_f64(x64)
        assert bytes(f32_view(x64)) == encode_f32(x64)  # converted, as encode_f32 does
        assert bytes(f64_view(x32[::2])) == encode_f64(x32[::2])  # strided: copied
        assert np.shares_memory(np.frombuffer(f32_view(x32), np.float32), x32)  # no copy
        assert np.shares_memory(np.frombuffer(f64_view(x64), np.float64), x64)


class TestChunksInDatabase:
    def test_chunks_written_and_read_back_bit_exact(self, db, machine_file):
        from rundash.ingest.machine_file import load_machine_description
        desc, _ = load_machine_description(machine_file)
        rng = np.random.default_rng(3)
        x = rng.standard_normal(3 * q.CHUNK_SAMPLES + 123).astype(np.float32)
        with db.write() as conn:
            mid, _ = q.upsert_machine(conn, desc)
            rid = q.create_run(conn, machine_id=mid, kind="run-up", label="r", cycle="",
                               notes="", started_at=None, source_name="x", source_sha256="0" * 64,
                               sample_rate_hz=1000.0, description_toml="")
            cid = q.add_channel(conn, run_id=rid, position=0, name="x1", role="probe",
                                probe_name="NDE-X", kind="proximity", unit="um", scale=1.0,
                                sample_rate_hz=1000.0)
            rows = [(cid, k, k * q.CHUNK_SAMPLES, x[k * q.CHUNK_SAMPLES:(k + 1) * q.CHUNK_SAMPLES])
                    for k in range(4)]
            q.write_chunks(conn, rows, 1000.0)
        with db.read() as conn:
            y = q.read_channel(conn, cid)
            part = q.read_channel(conn, cid, 65000, 140000)
        assert_array_equal(x.view(np.uint32), y.view(np.uint32))
        assert_array_equal(x[65000:140000], part)
