"""Big runs through the dashboard: a file already on this computer is imported by its path
(no upload, no 64 MB cap), only when the dashboard serves the loopback and the request
comes from it; uploads keep the cap.

The browser test writes a float WAV with scipy (an independent writer) larger than the
upload cap, types its path into the import page in headless Chromium and checks the
stored samples against the file read back by scipy. Its size is
``RUNDASH_BIG_IMPORT_MB`` (default 400 MB, the size of a 10-minute, 6-channel record at
25.6 kHz in 32-bit samples; about 30 s on 2 cores, most of it writing the file; set a
smaller size, still above the 64 MB cap, for a quicker run).
"""

from __future__ import annotations

import os
import time
from pathlib import Path

import numpy as np
import pytest

from rundash.dashboard import ids
from rundash.dashboard.app import create_app
from rundash.dashboard.pages import importer
from rundash.storage import queries as q
from rundash.storage.engine import open_database
from rundash.workflows.demo import sample_runs_dir
from tests.dashboard.test_browser import _click, _severe, _shot

BIG_MB = float(os.environ.get("RUNDASH_BIG_IMPORT_MB", "400"))
FS = 25_600.0
N_CHANNELS = 6  # the demo machine: tach on ch1, five probes on ch2-ch6


def write_big_wav(path: Path, megabytes: float, *, fs: float = FS) -> int:
    """A 6-channel IEEE-float WAV of about ``megabytes`` MB written by scipy.io.wavfile from
    a memory-mapped array (so memory stays small): a once-per-rev pulse at 3000 rpm on ch1,
    1X sines on the probes. Returns the number of frames."""
    from scipy.io import wavfile

    n = int(megabytes * 1e6 / (4 * N_CHANNELS))
    raw = path.with_suffix(".f32")
    x = np.lib.format.open_memmap(raw, mode="w+", dtype=np.float32, shape=(n, N_CHANNELS))
    step = 1 << 20
    for i in range(0, n, step):
        t = np.arange(i, min(n, i + step)) / fs
        phase = (50.0 * t) % 1.0  # 3000 rpm
        x[i:i + t.size, 0] = np.where(phase < 0.1, 0.5, 0.0)
        for k in range(1, N_CHANNELS):
            x[i:i + t.size, k] = 0.05 * np.sin(2 * np.pi * (50.0 * t - k / 8))
    x.flush()
    wavfile.write(path, int(fs), x)
    del x
    raw.unlink()
    return n


@pytest.fixture
def machine_db(tmp_path):
    """A database that knows the demo machine (one small demo run imported, not processed),
    so the import page offers its stored description."""
    from rundash.ingest.importer import import_run
    from rundash.ingest.machine_file import load_machine_description

    folder = sample_runs_dir()
    desc, text = load_machine_description(folder / "tarnwick-k410.toml")
    db = open_database(str(tmp_path / "big.sqlite"), create=True)
    import_run(db, folder / "k410_2023_up.wav", desc, description_text=text)
    yield db, text
    db.dispose()


class TestWhoMayImportByPath:
    @pytest.mark.parametrize("configured, remote, allowed", [
        (True, "127.0.0.1", True), (True, "::1", True), (True, "10.0.0.5", False),
        (False, "127.0.0.1", False)])
    def test_only_a_loopback_server_and_a_loopback_request(self, machine_db, configured,
                                                           remote, allowed):
        db, _ = machine_db
        app = create_app(db, local_files=configured)
        with app.server.test_request_context("/", environ_base={"REMOTE_ADDR": remote}):
            assert importer.local_files_allowed() is allowed
        assert importer.local_files_allowed() is False  # outside a request: never

    def test_serve_sets_it_from_the_host(self):
        # the loopback rule of security.is_loopback (127.0.0.0/8, ::1, localhost)
        from rundash.dashboard.security import is_loopback

        assert is_loopback("127.0.0.1") and is_loopback("localhost")
        assert not is_loopback("0.0.0.0")

    def test_a_path_from_another_computer_is_refused_without_looking(self, machine_db,
                                                                     tmp_path):
        db, text = machine_db
        jobs = importer.ImportJobs(db)
        job, error = importer.start_import(
            jobs, db, data_contents=None, data_name=None, machine_source="upload",
            machine_contents=None, label="", cycle="", kind="mixed", started="",
            local_path=str(sample_runs_dir() / "k410_2023_down.wav"), local_allowed=False)
        assert job is None and "only when the dashboard serves this computer alone" in error

    @pytest.mark.parametrize("text, words", [
        ("relative/run.wav", "give the full path"),
        ("/no/such/folder/run.wav", "no such file on this computer"),
        ("/etc/passwd", "allowed a file ending in"),
        ("", "give the path"),
    ])
    def test_bad_paths_are_one_line(self, text, words):
        with pytest.raises(ValueError, match=words):
            importer.local_file(text)

    def test_a_folder_or_a_fifo_is_not_a_file(self, tmp_path):
        folder = tmp_path / "dir.wav"
        folder.mkdir()
        with pytest.raises(ValueError, match="not a regular file"):
            importer.local_file(str(folder))
        fifo = tmp_path / "pipe.wav"
        os.mkfifo(fifo)
        with pytest.raises(ValueError, match="not a regular file"):
            importer.local_file(str(fifo))  # never opened: it would block

    def test_the_upload_keeps_its_cap(self):
        big = "data:application/octet-stream;base64," + "A" * (
            (importer.MAX_UPLOAD_BYTES // 3 + 2) * 4)
        with pytest.raises(ValueError, match="larger than the limit of 64 MB"):
            importer.decode_upload(big, what="data file", max_bytes=importer.MAX_UPLOAD_BYTES)

    def test_a_job_imports_in_place(self, machine_db, tmp_path):
        db, text = machine_db
        src = sample_runs_dir() / "k410_2023_down.wav"
        jobs = importer.ImportJobs(db)
        st = jobs.run_sync(filename=src.name, data=None, description_text=text, label="",
                           cycle="", kind="mixed", started_at=None, process=False,
                           stored_description=True, path=src)
        assert st.done and st.error is None and st.run_id is not None
        with db.read() as conn:
            assert q.get_run(conn, st.run_id).source_name == src.name


@pytest.mark.browser
def test_a_big_run_imports_by_path_in_the_browser(dash_duo, machine_db, tmp_path):
    db, _ = machine_db
    wav = tmp_path / "big-run.wav"
    n = write_big_wav(wav, BIG_MB)
    size_mb = wav.stat().st_size / 1e6
    assert size_mb > importer.MAX_UPLOAD_MB * 2**20 / 1e6  # more than an upload may carry

    dash_duo.start_server(create_app(db, local_files=True))  # dash_duo serves on 127.0.0.1
    dash_duo.driver.get(dash_duo.server_url + "/import")
    dash_duo.wait_for_element(f"#{ids.LOCAL_PATH}", timeout=15)
    assert "capped at 64 MB" in dash_duo.find_element(".card").text
    dash_duo.find_element(f"#{ids.LOCAL_PATH}").send_keys(str(wav))
    _click(dash_duo, f"#{ids.PROCESS} input")  # untick: import only
    t0 = time.monotonic()
    _click(dash_duo, f"#{ids.START}")
    dash_duo.wait_for_contains_text(f"#{ids.STATUS}", "Done in", timeout=900)
    wall = time.monotonic() - t0
    print(f"\n{size_mb:.0f} MB WAV imported through the dashboard by path in {wall:.1f} s "
          f"({size_mb / wall:.0f} MB/s)")
    result = dash_duo.find_element(f"#{ids.RESULT}").text
    assert f"{n / FS:.1f} s at 25600 Hz" in result
    _shot(dash_duo, "import-by-path")

    with db.read() as conn:
        run = next(r for r in q.list_runs(conn) if r.source_name == wav.name)
        chans = q.list_channels(conn, run.id)
        assert [c.n_samples for c in chans] == [n] * N_CHANNELS
        tach = q.read_channel(conn, chans[0].id, n - 1000, n)
        probe = q.read_channel(conn, chans[3].id, n // 2, n // 2 + 1000)
    from scipy.io import wavfile

    _, ref = wavfile.read(wav, mmap=True)
    # README, "Importing your own data": float WAV samples times [data].full_scale_v are
    # volts (16 V in tarnwick-k410.toml); a probe's volts / (sensitivity mV per unit / 1000)
    # are its units (7.874 mV/um for ch4, K410-NDE-X). float32 storage: rtol 1e-6
    np.testing.assert_allclose(tach, ref[n - 1000:, 0] * 16.0, rtol=1e-6)
    want = ref[n // 2:n // 2 + 1000, 3].astype(np.float64) * 16.0 / (7.874 / 1000.0)
    np.testing.assert_allclose(probe, want, rtol=1e-6, atol=1e-6 * np.abs(want).max())
    del ref
    assert _severe(dash_duo) == []
