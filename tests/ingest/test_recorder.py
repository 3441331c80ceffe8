"""rundash.ingest.recorder and rundash.ingest.sources: chunk layout, run state, the TCP
framing and its errors, the folder watch and a driver of one's own."""

from __future__ import annotations

import json
import re
import socket
import struct
import threading
import time

import numpy as np
import pytest
from numpy.testing import assert_array_equal
from scipy.io import wavfile

from rundash.errors import ConfigError, InputError
from rundash.ingest.machine_file import load_machine_description
from rundash.ingest.recorder import record
from rundash.ingest.sources import (
    FolderSource, ReplaySource, Source, StreamHeader, TcpSource, encode_frame, encode_header,
    end_frame, parse_source,
)
from rundash.storage import queries as q
from rundash.storage.engine import open_database
from tests import live_synth
from tests.conftest import count_chunks, run_warnings

CHANNELS = ("ch1", "ch2", "ch3")


@pytest.fixture
def machine(tmp_path):
    p = tmp_path / "machine.toml"
    p.write_text(live_synth.MACHINE, encoding="utf-8")
    return load_machine_description(p)


def _stored(db, run_id):
    with db.read() as conn:
        run = q.get_run(conn, run_id)
        chans = q.list_channels(conn, run_id)
        data = np.vstack([q.read_channel(conn, c.id) for c in chans])
        n_chunks = count_chunks(conn, chans[0].id)
    return run, chans, data, n_chunks


class ArraySource(Source):
    """A driver of our own for the tests: blocks of a given array."""

    name = "array"

    def __init__(self, x, fs, block=1000, on_block=None):
        self.x, self.fs, self.block, self.on_block = x, fs, block, on_block

    def open(self):
        return StreamHeader(channels=CHANNELS, sample_rate_hz=self.fs, units=("V",) * 3)

    def blocks(self):
        for a in range(0, self.x.shape[1], self.block):
            if self.on_block is not None:
                self.on_block(a)
            yield self.x[:, a:a + self.block]


class TestRecorder:
    def test_chunks_like_the_importer_and_state_incomplete_until_the_end(self, db, machine):
        desc, text = machine
        rng = np.random.default_rng(0)
        n = 2 * q.CHUNK_SAMPLES + 1234  # two whole chunks and a partial last one
        x = rng.standard_normal((3, n)).astype(np.float32)
        seen = []

        def look(a):  # a reader in another connection while the recorder writes
            if a and a % 40000 == 0:
                with db.read() as conn:
                    r = q.list_runs(conn)[0]
                    seen.append((r.state, count_chunks(conn, q.list_channels(conn, r.id)[0].id)))

        res = record(db, desc, ArraySource(x, 4096.0, on_block=look), description_text=text)
        assert res.state == "complete" and res.n_samples == n
        run, chans, data, n_chunks = _stored(db, res.run_id)
        assert run.state == "complete" and n_chunks == 3
        assert {s for s, _ in seen} == {"incomplete"}
        assert [k for _, k in seen] == sorted(k for _, k in seen) and seen[-1][1] >= 1
        # stored values: volts / sensitivity (7.874 mV/um) for probes, tach as is
        scale = np.array([1.0, 1000 / 7.874, 1000 / 7.874], np.float64)[:, None]
        assert_array_equal(data, (x.astype(np.float64) * scale).astype(np.float32))
        assert [c.role for c in chans] == ["tach", "probe", "probe"]

    def test_replay_paces_at_the_asked_speed(self, db, machine, tmp_path):
        desc, text = machine
        wav = tmp_path / "r.wav"
        live_synth.write_run(wav, [0, 4], [600, 1200], fs=2048.0)
        t0 = time.monotonic()
        res = record(db, desc, ReplaySource(wav, desc.data, speed=8.0), description_text=text)
        took = time.monotonic() - t0
        assert res.n_samples == 4 * 2048
        assert 4.0 / 8.0 * 0.9 < took < 4.0 / 8.0 + 2.0  # at 8 x real time
        fs, raw = wavfile.read(str(wav))  # scipy as the independent reader
        _, _, data, _ = _stored(db, res.run_id)
        assert_array_equal(data[0], raw[:, 0])


def _send(port, payload_parts, delay=0.0):
    s = socket.create_connection(("127.0.0.1", port), timeout=10)
    for p in payload_parts:
        s.sendall(p)
        time.sleep(delay)
    s.close()


class TestTcpSource:
    def _run(self, db, machine, parts):
        desc, text = machine
        src = TcpSource("127.0.0.1", 0, accept_timeout_s=10, read_timeout_s=10)
        th = threading.Thread(target=_send, args=(src.port, parts))
        th.start()
        res = record(db, desc, src, description_text=text)
        th.join()
        return res

    def _header(self, fs=4096.0):
        return encode_header(StreamHeader(channels=CHANNELS, sample_rate_hz=fs,
                                          units=("V",) * 3))

    def test_clean_stream_is_stored_exactly(self, db, machine):
        x = np.random.default_rng(1).standard_normal((3, 5000)).astype(np.float32)
        parts = [self._header()] + [encode_frame(x[:, a:a + 700]) for a in range(0, 5000, 700)]
        res = self._run(db, machine, parts + [end_frame(3)])
        assert res.state == "complete" and res.error is None and res.n_samples == 5000
        _, _, data, _ = _stored(db, res.run_id)
        assert_array_equal(data[0], x[0])

    def test_bad_header_is_refused_before_any_run(self, db, machine):
        with pytest.raises(Exception, match="bad start b'NOPE'"):
            self._run(db, machine, [b"NOPE" + bytes(8)])
        with db.read() as conn:
            assert q.list_runs(conn) == []

    def test_header_json_without_channels(self, db, machine):
        body = b'{"sample_rate_hz": 100}'
        head = b"RDLS" + bytes([1, 0, 0, 0]) + struct.pack("<I", len(body)) + body
        with pytest.raises(Exception, match="'channels'"):
            self._run(db, machine, [head])

    def test_short_frame_keeps_what_was_recorded(self, db, machine):
        x = np.ones((3, 1000), np.float32)
        frame = encode_frame(x)
        res = self._run(db, machine, [self._header(), frame, frame, frame[:100]])
        assert res.state == "incomplete"
        assert "frame 3 is short" in res.error and "closed after 92 of 12000 bytes" in res.error
        run, _, data, _ = _stored(db, res.run_id)
        assert run.state == "incomplete" and data.shape[1] == 2000
        assert any("recording ended early" in w for w in q_warnings(db, res.run_id))

    def test_wrong_channel_count(self, db, machine):
        x = np.ones((3, 500), np.float32)
        res = self._run(db, machine, [self._header(), encode_frame(x), encode_frame(x[:2])])
        assert res.state == "incomplete"
        assert res.error == "stream: frame 2 has 2 channels, the header named 3"
        _, _, data, _ = _stored(db, res.run_id)
        assert data.shape[1] == 500

    def test_closed_without_end_frame(self, db, machine):
        x = np.ones((3, 500), np.float32)
        res = self._run(db, machine, [self._header(), encode_frame(x)])
        assert res.state == "incomplete" and "without the end-of-run frame" in res.error

    def test_only_loopback(self):
        with pytest.raises(ConfigError, match="loopback"):
            TcpSource("0.0.0.0", 0)

    def test_sender_module_plays_a_file(self, db, machine, tmp_path):
        from rundash.ingest.tcp_send import send_file
        desc, text = machine
        wav = tmp_path / "s.wav"
        live_synth.write_run(wav, [0, 3], [600, 900], fs=2048.0)
        src = TcpSource("127.0.0.1", 0, accept_timeout_s=10)
        th = threading.Thread(target=send_file, args=(wav, "127.0.0.1", src.port),
                              kwargs=dict(speed=0, data=desc.data))
        th.start()
        res = record(db, desc, src, description_text=text)
        th.join()
        assert res.state == "complete" and res.n_samples == 3 * 2048
        _, raw = wavfile.read(str(wav))
        _, _, data, _ = _stored(db, res.run_id)
        assert_array_equal(data[0], raw[:, 0])


def q_warnings(db, run_id):
    with db.read() as conn:
        return run_warnings(conn, run_id)


class TestFolderSource:
    def test_files_in_name_order_each_once(self, db, machine, tmp_path):
        desc, text = machine
        folder = tmp_path / "drop"
        folder.mkdir()
        rng = np.random.default_rng(2)
        parts = [rng.standard_normal((1000, 3)).astype(np.float32) for _ in range(3)]
        # written out of name order, one later while the recorder runs
        wavfile.write(str(folder / "b_002.wav"), 4096, parts[1])
        wavfile.write(str(folder / "a_001.wav"), 4096, parts[0])
        (folder / "notes.txt.partial").write_text("not data")

        def later():
            time.sleep(0.5)
            wavfile.write(str(folder / "c_003.wav"), 4096, parts[2])
            time.sleep(0.5)
            (folder / "end-of-run").write_text("")

        th = threading.Thread(target=later)
        th.start()
        src = FolderSource(folder, desc.data, poll_s=0.1, idle_timeout_s=10)
        res = record(db, desc, src, description_text=text)
        th.join()
        assert res.error is None and res.state == "complete"
        assert src.files_taken == ["a_001.wav", "b_002.wav", "c_003.wav"]
        _, _, data, _ = _stored(db, res.run_id)
        assert_array_equal(data[0], np.concatenate([p[:, 0] for p in parts]))


class TestParseSource:
    def test_forms(self, tmp_path):
        wav = tmp_path / "a@b.wav"
        live_synth.write_run(wav, [0, 1], [600, 600], fs=1024.0)
        s = parse_source(f"replay:{wav}@20")
        assert isinstance(s, ReplaySource) and s.speed == 20 and s.path == wav
        assert parse_source(f"replay:{wav}@0").speed == 0
        t = parse_source("tcp:127.0.0.1:0")
        assert isinstance(t, TcpSource)
        t.close()
        p = parse_source("python:tests.ingest.test_recorder:make_source=5")
        assert type(p).__name__ == "ArraySource" and p.x.shape == (3, 5)  # imported anew

    @pytest.mark.parametrize("text, match", [
        ("nothing", "Invalid value for 'source'"),
        ("ftp:host", "Invalid value for 'source'"),
        ("replay:x.wav@fast", "SPEED a number"),
        ("python:tests.ingest.test_recorder:nope", "cannot load 'nope'"),
        ("python:tests.ingest.test_recorder:CHANNELS", "not callable|Source"),
    ])
    def test_refused(self, text, match):
        with pytest.raises((ConfigError, TypeError), match=match):
            parse_source(text)


def make_source(n="10"):
    return ArraySource(np.zeros((3, int(n)), np.float32), 1024.0)


class TestStreamRobustness:
    """A sender cannot hold the recorder, a second sender is refused, and a stream header
    outside physical ranges is refused before a run exists."""

    def _header(self, fs=4096.0):
        return encode_header(StreamHeader(channels=CHANNELS, sample_rate_hz=fs,
                                          units=("V",) * 3))

    def test_a_trickling_sender_meets_a_per_frame_deadline(self, db, machine):
        desc, text = machine
        x = np.ones((3, 500), np.float32)
        frame = encode_frame(x)
        src = TcpSource("127.0.0.1", 0, accept_timeout_s=10, read_timeout_s=1.5)
        stop = threading.Event()

        def trickle():  # a whole frame, then the next one byte every 0.3 s: each read
            # arrives well inside the timeout, the frame never does
            s = socket.create_connection(("127.0.0.1", src.port), timeout=10)
            s.sendall(self._header() + frame)
            for b in frame:
                if stop.wait(0.3):
                    break
                try:
                    s.sendall(bytes([b]))
                except OSError:
                    break
            s.close()

        th = threading.Thread(target=trickle)
        th.start()
        t0 = time.monotonic()
        res = record(db, desc, src, description_text=text)
        took = time.monotonic() - t0
        stop.set()
        th.join()
        assert res.state == "incomplete" and res.n_samples == 500
        assert re.fullmatch(r"stream: frame 2 (header )?did not arrive whole within 1\.5 s "
                            r"\(\d+ of \d+ bytes came\)", res.error), res.error
        assert took < 6.0  # one deadline (1.5 s) after the first frame, not one per byte

    def test_a_second_sender_is_refused_not_queued(self, db, machine):
        desc, text = machine
        src = TcpSource("127.0.0.1", 0, accept_timeout_s=10, read_timeout_s=10)
        port = src.port
        x = np.ones((3, 200), np.float32)
        first_in = threading.Event()
        second = {}

        def first():
            s = socket.create_connection(("127.0.0.1", port), timeout=10)
            s.sendall(self._header())
            first_in.set()
            time.sleep(0.5)  # the recorder has accepted by now; a second sender tries
            try:
                s2 = socket.create_connection(("127.0.0.1", port), timeout=5)
                s2.close()
                second["result"] = "connected"
            except ConnectionRefusedError:
                second["result"] = "refused"
            s.sendall(encode_frame(x) + end_frame(3))
            s.close()

        th = threading.Thread(target=first)
        th.start()
        res = record(db, desc, src, description_text=text)
        th.join()
        assert res.state == "complete" and res.n_samples == 200
        assert second["result"] == "refused"

    @pytest.mark.parametrize("fs, shown", [(3.9e-5, "3.9e-05"), (1e12, "1e+12"),
                                           (1e-300, "1e-300"), (0.0, "0.0")])
    def test_a_sample_rate_outside_physical_range_is_refused_before_a_run(
            self, db, machine, fs, shown):
        desc, text = machine
        body = json.dumps({"sample_rate_hz": fs, "channels": [{"name": c, "units": "V"}
                                                               for c in CHANNELS]}).encode()
        head = b"RDLS" + bytes([1, 0, 0, 0]) + struct.pack("<I", len(body)) + body
        src = TcpSource("127.0.0.1", 0, accept_timeout_s=10, read_timeout_s=10)
        th = threading.Thread(target=_send, args=(src.port, [head]))
        th.start()
        with pytest.raises(InputError) as ei:
            record(db, desc, src, description_text=text)
        th.join()
        assert str(ei.value) == ("stream header: 'sample_rate_hz': expected a sample rate "
                                 f"from 10 to 1e+07 Hz, got {shown}")
        with db.read() as conn:
            assert q.list_runs(conn) == []

    def test_a_stream_broken_before_its_first_sample_leaves_no_run(self, db, machine):
        desc, text = machine
        src = TcpSource("127.0.0.1", 0, accept_timeout_s=10, read_timeout_s=10)
        th = threading.Thread(target=_send, args=(src.port, [self._header(), b"XX" + bytes(6)]))
        th.start()
        with pytest.raises(InputError, match="frame 1 starts with b'XX'"):
            record(db, desc, src, description_text=text)
        th.join()
        with db.read() as conn:
            assert q.list_runs(conn) == []

    def test_a_non_finite_sample_is_named_plainly(self, db, machine):
        desc, text = machine
        x = np.ones((3, 300), np.float32)
        x[1, 17] = np.nan
        res = TestTcpSource()._run(db, machine, [self._header(), encode_frame(np.ones((3, 10),
                                                                                  np.float32)),
                                                 encode_frame(x), end_frame(3)])
        assert res.state == "incomplete"
        assert "channel 'ch2', sample 27: value nan is not a finite number" in res.error
        assert "np." not in res.error
