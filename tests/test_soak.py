"""Soak: a writer process imports and processes runs while readers poll, for SOAK_S seconds.

Readers: three threads of this process and one separate process call the storage read
functions (list_runs, load_processing, load_tracks) in read transactions, and one thread
polls the dashboard, served by its own process on 127.0.0.1, over HTTP (the page shell,
its layout and the runs page's routing callback). Every error is counted; the test wants
none ("database is locked" above all), and no stale or partial state shown as final:
every run a reader sees is 'complete' (an import is one transaction), a run shown as
processed has its processing record and its vector tracks in the same snapshot, and runs
never vanish. Loopback only; bounded in time and in count.
"""

from __future__ import annotations

import json
import os
import socket
import subprocess
import sys
import threading
import time
import urllib.request
from pathlib import Path

from rundash.storage import queries as q
from rundash.storage.engine import open_database
from tests.badinput.make_corpus import machine_text, signals, write_csv

ROOT = Path(__file__).resolve().parents[1]
SOAK_S = float(os.environ.get("RUNDASH_SOAK_S", "45"))
MAX_IMPORTS = 200

WRITER = """
import sys, time
from rundash.cli import main
db, data, machine, soak_s, max_n = sys.argv[1], sys.argv[2], sys.argv[3], float(sys.argv[4]), int(sys.argv[5])
end = time.monotonic() + soak_s
n = 0
while time.monotonic() < end and n < max_n:
    rc = main(["import", "--machine", machine, "--db", db, "--quiet", "--force", "--process",
               "--label", f"soak {n}", "--", data])
    if rc != 0:
        sys.exit(10 + rc)
    n += 1
print(n)
"""

READER = """
import sys, time
from rundash.storage.engine import open_database
from rundash.storage import queries as q
db = open_database(sys.argv[1]); end = time.monotonic() + float(sys.argv[2])
polls = errors = 0
while time.monotonic() < end:
    try:
        with db.read() as conn:
            for r in q.list_runs(conn):
                assert r.state == "complete", r.state
                if r.processed:
                    assert q.load_processing(conn, r.id) is not None
                    assert q.load_tracks(conn, r.id, order=1.0)
        polls += 1
    except Exception as exc:
        errors += 1
        print("reader error:", type(exc).__name__, exc, file=sys.stderr)
print(polls, errors)
"""


def _env():
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    env.pop("RUNDASH_PASSWORD", None)
    return env


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _poll_storage(db, stop, log):
    seen: set[int] = set()  # per reader: a later snapshot holds every run of an earlier one
    while not stop.is_set():
        try:
            with db.read() as conn:
                runs = q.list_runs(conn)
                for r in runs:
                    if r.state != "complete":
                        log["stale"].append(f"run {r.id} shown in state {r.state!r}")
                    if r.processed:
                        if q.load_processing(conn, r.id) is None:
                            log["stale"].append(f"run {r.id} processed without a record")
                        if not q.load_tracks(conn, r.id, order=1.0):
                            log["stale"].append(f"run {r.id} processed without tracks")
            ids = {r.id for r in runs}
            if not seen <= ids:
                log["stale"].append(f"runs vanished: {sorted(seen - ids)}")
            seen = ids
            log["polls"] += 1
        except Exception as exc:  # counted, not hidden: the test fails on any
            log["errors"].append(f"{type(exc).__name__}: {exc}")


def _poll_http(port, stop, log):
    base = f"http://127.0.0.1:{port}"
    route = json.dumps({
        # the router's two outputs: the page and the browser tab's title
        "output": "..page.children...page-title.data..",
        "outputs": [{"id": "page", "property": "children"},
                    {"id": "page-title", "property": "data"}],
        "inputs": [{"id": "url", "property": "pathname", "value": "/"}],
        "changedPropIds": ["url.pathname"], "state": []}).encode()
    while not stop.is_set():
        t = time.monotonic()
        try:
            for path in ("/", "/_dash-layout"):
                log["path"] = path
                with urllib.request.urlopen(base + path, timeout=30) as r:
                    assert r.status == 200
            req = urllib.request.Request(base + "/_dash-update-component", data=route,
                                         headers={"Content-Type": "application/json"})
            log["path"] = "route"
            with urllib.request.urlopen(req, timeout=30) as r:
                body = r.read().decode()
                assert r.status == 200 and "Traceback" not in body
            for state in ("importing", "incomplete"):
                if f'"{state}"' in body:
                    log["stale"].append(f"dashboard shows a run in state {state!r}")
            log["http"] += 1
            log["http_max_s"] = max(log["http_max_s"], time.monotonic() - t)
        except Exception as exc:
            log["errors"].append(f"http {type(exc).__name__} after "
                                 f"{time.monotonic() - t:.1f} s (round {log['http']}): {exc}")
            time.sleep(0.2)


def test_writer_and_readers_soak(tmp_path):
    db_path = tmp_path / "soak.sqlite"
    data = write_csv(tmp_path / "soak.csv", signals())
    machine = tmp_path / "machine.toml"
    machine.write_text(machine_text(), encoding="utf-8")
    db = open_database(str(db_path), create=True)  # schema first, so no process races the migration

    port = _free_port()
    server_log = open(tmp_path / "server.log", "wb")  # a pipe would fill up and stall it
    server = subprocess.Popen(
        [sys.executable, "-c", "import sys; from rundash.storage.engine import open_database;"
         "from rundash.dashboard.app import serve;"
         "serve(open_database(sys.argv[1]), host='127.0.0.1', port=int(sys.argv[2]))",
         str(db_path), str(port)], cwd=ROOT, env=_env(), stdout=subprocess.DEVNULL,
        stderr=server_log)
    try:
        deadline = time.monotonic() + 60
        while True:
            try:
                urllib.request.urlopen(f"http://127.0.0.1:{port}/", timeout=2).close()
                break
            except OSError:
                assert server.poll() is None, (tmp_path / "server.log").read_text()
                assert time.monotonic() < deadline, "dashboard did not come up"
                time.sleep(0.2)

        t0 = time.monotonic()
        writer = subprocess.Popen([sys.executable, "-c", WRITER, str(db_path), str(data),
                                   str(machine), str(SOAK_S), str(MAX_IMPORTS)], cwd=ROOT,
                                  env=_env(), stdout=subprocess.PIPE, stderr=subprocess.PIPE)
        reader = subprocess.Popen([sys.executable, "-c", READER, str(db_path), str(SOAK_S)],
                                  cwd=ROOT, env=_env(), stdout=subprocess.PIPE,
                                  stderr=subprocess.PIPE)
        stop = threading.Event()
        log = {"errors": [], "stale": [], "polls": 0, "http": 0, "http_max_s": 0.0,
               "path": ""}
        threads = [threading.Thread(target=_poll_storage, args=(db, stop, log))
                   for _ in range(3)]
        threads.append(threading.Thread(target=_poll_http, args=(port, stop, log)))
        for t in threads:
            t.start()
        w_out, w_err = writer.communicate(timeout=SOAK_S + 120)
        r_out, r_err = reader.communicate(timeout=SOAK_S + 120)
        stop.set()
        for t in threads:
            t.join(timeout=60)
        minutes = (time.monotonic() - t0) / 60
    finally:
        server.terminate()
        server.wait(timeout=30)
        server_log.close()
        db.dispose()

    assert writer.returncode == 0, w_err.decode()[-2000:]
    n_runs = int(w_out.split()[-1])
    polls, r_errors = (int(v) for v in r_out.split())
    locked = sum("locked" in e for e in log["errors"]) + r_err.decode().count("locked")
    print(f"soak: {minutes:.2f} min, {n_runs} runs imported and processed, "
          f"{log['polls']} thread polls, {polls} process polls, {log['http']} HTTP rounds "
          f"(slowest {log['http_max_s']:.1f} s), "
          f"{len(log['errors']) + r_errors} errors ({locked} 'database is locked'), "
          f"{len(log['stale'])} stale reads")
    assert n_runs >= 3 and log["polls"] > 10 and polls > 10 and log["http"] > 3
    assert locked == 0
    assert log["stale"] == [], log["stale"][:10]
    assert log["errors"] == [] and r_errors == 0, (log["errors"][:5], log["path"],
                                                         r_err.decode()[-2000:])
