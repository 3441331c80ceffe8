"""``rundash serve`` runs a production WSGI server (waitress), not Flask's development
server: a real process, a real socket, real HTTP requests (no mocks)."""

from __future__ import annotations

import base64
import os
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.request
from pathlib import Path

import pytest

from rundash.storage.engine import open_database

ROOT = Path(__file__).resolve().parents[2]
PASSWORD = "a-long-test-password"


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _get(url: str, *, auth: str | None = None, timeout: float = 10.0):
    req = urllib.request.Request(url)
    if auth:
        req.add_header("Authorization", "Basic " + base64.b64encode(
            f"rundash:{auth}".encode()).decode())
    return urllib.request.urlopen(req, timeout=timeout)


@pytest.fixture
def served(tmp_path):
    """Start ``rundash serve`` with the given host; yields (port, log path, process)."""
    db_path = tmp_path / "serve.sqlite"
    open_database(str(db_path), create=True).dispose()
    procs = []

    def start(host: str, *, password: str | None):
        port = _free_port()
        env = dict(os.environ)
        env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
        env.pop("RUNDASH_PASSWORD", None)
        if password:
            env["RUNDASH_PASSWORD"] = password
        log = tmp_path / f"serve-{port}.log"
        fh = open(log, "wb")
        proc = subprocess.Popen(
            [sys.executable, "-c", "import sys; from rundash.cli import main; sys.exit(main())",
             "serve", "--db", str(db_path), "--host", host, "--port", str(port)],
            cwd=ROOT, env=env, stdout=fh, stderr=subprocess.STDOUT)
        procs.append((proc, fh))
        deadline = time.monotonic() + 60
        while True:
            try:
                _get(f"http://127.0.0.1:{port}/", auth=password, timeout=2).close()
                break
            except urllib.error.HTTPError:
                break  # it answers
            except OSError:
                assert proc.poll() is None, log.read_text()
                assert time.monotonic() < deadline, "the dashboard did not come up"
                time.sleep(0.2)
        return port, log, proc

    yield start
    for proc, fh in procs:
        proc.terminate()
        proc.wait(timeout=30)
        fh.close()


def test_beyond_the_loopback_serves_through_waitress(served):
    port, log, _ = served("0.0.0.0", password=PASSWORD)
    with _get(f"http://127.0.0.1:{port}/", auth=PASSWORD) as resp:
        assert resp.status == 200
        # waitress answers with the ident we give it; Werkzeug would say "Werkzeug/x.y"
        assert resp.headers["Server"] == "rundash"
        assert "<title>" in resp.read().decode()
    with _get(f"http://127.0.0.1:{port}/_dash-layout", auth=PASSWORD) as resp:
        assert resp.status == 200
    with pytest.raises(urllib.error.HTTPError) as err:
        _get(f"http://127.0.0.1:{port}/")  # no credentials
    assert err.value.code == 401
    text = log.read_text()
    assert "development server" not in text.lower(), text
    assert f"rundash dashboard on http://0.0.0.0:{port}/" in text


def test_loopback_serves_through_waitress_too(served):
    port, log, _ = served("127.0.0.1", password=None)
    with _get(f"http://127.0.0.1:{port}/") as resp:
        assert resp.status == 200
        assert resp.headers["Server"] == "rundash"
    assert "development server" not in log.read_text().lower()


def test_oversized_body_refused_by_the_server(served):
    from types import SimpleNamespace

    from rundash.dashboard.pages.importer import MAX_UPLOAD_BYTES
    from rundash.dashboard.security import cap_request_size

    port, _, _ = served("127.0.0.1", password=None)
    cap = cap_request_size(SimpleNamespace(config={}), MAX_UPLOAD_BYTES)
    with socket.create_connection(("127.0.0.1", port), timeout=10) as s:
        # announce a body one byte over the cap and send none: refused before it is read
        s.sendall(f"POST /_dash-update-component HTTP/1.1\r\nHost: 127.0.0.1\r\n"
                  f"Content-Type: application/json\r\nContent-Length: {cap + 1}\r\n"
                  "\r\n".encode())
        head = s.recv(4096).decode("latin-1")
    assert head.split()[1] == "413", head
