"""Live data sources for the recorder: what a driver must offer, and the built-in ones.

A source says once which channels it carries, at what common sample rate and in which
units (:class:`StreamHeader`), then yields blocks of shape ``(n_channels, n)`` (float32
or float64, any ``n >= 1``) in order, in the source's own values (volts or engineering
units, before any probe sensitivity is applied) — the same values a file reader gives.
The iterator ending means the run ended; an :class:`~rundash.errors.InputError` means
the stream broke (the recorder keeps what arrived and marks the run incomplete).

Built-in sources, by the text ``rundash record --source`` takes (:func:`parse_source`):

``replay:PATH[@SPEED]``
    Any importable file played back at real time (``@1``, the default), ``@20`` for 20 x
    real time, ``@0`` as fast as it can be read (rehearsal, training, tests).
``folder:DIR``
    A folder a data recorder drops files into: new files are taken in name order, each
    once, when their size has stopped changing (only files whose ending belongs to the
    format read, so partial or side files are left alone); the run ends when a file named
    ``end-of-run`` appears or no new file came for ``idle_timeout_s`` (default 30 s).
    Every file must carry the same channels at the same rate.
``tcp:127.0.0.1:PORT``
    A TCP stream on loopback in the framing described below; the recorder listens on
    PORT and takes one sender (``python -m rundash.ingest.tcp_send`` is a small one).
``python:MODULE:FACTORY[=ARG]``
    A driver of your own: ``FACTORY(ARG)`` (or ``FACTORY()``) from the importable
    ``MODULE`` must return a :class:`Source`.

Stream framing (``tcp:``), version 1, all integers little-endian:

* header: the 4 bytes ``RDLS``, one byte version (1), three zero bytes, a uint32
  length ``L``, then ``L`` bytes of UTF-8 JSON
  ``{"sample_rate_hz": 25600.0, "channels": [{"name": "ch1", "units": "V"}, ...]}``;
* frames: the 2 bytes ``FR``, a uint16 channel count (must equal the header's), a
  uint32 sample count ``n`` per channel, then ``n * n_channels`` float32 values
  interleaved sample by sample (``s0c0 s0c1 ... s0cK s1c0 ...``);
* end of run: a frame with ``n = 0``. A connection closed without it ends the run as
  incomplete.

A driver of your own subclasses :class:`Source`::

    import numpy as np
    from rundash.ingest.sources import Source, StreamHeader

    class MyDaq(Source):
        name = "my-daq"

        def open(self):
            self.dev = connect_to_hardware()                  # your code
            return StreamHeader(channels=("tach", "x1", "y1"), sample_rate_hz=25600.0,
                                units=("V", "V", "V"))

        def blocks(self):
            while self.dev.running():
                yield np.asarray(self.dev.read(2560), dtype=np.float32)  # (3, 2560)

        def close(self):
            self.dev.close()

and is named ``--source python:mydaq:MyDaq``.
"""

from __future__ import annotations

import importlib
import json
import socket
import struct
import time
from abc import ABC, abstractmethod
from dataclasses import dataclass
from pathlib import Path
from typing import Iterator

import numpy as np

from rundash.errors import ConfigError, InputError, invalid_value
from rundash.ingest.bounds import CHANNELS, SAMPLE_RATE_HZ, out_of_range
from rundash.model import DataSpec

MAGIC = b"RDLS"
VERSION = 1
FRAME_MAGIC = b"FR"
MAX_HEADER_BYTES = 1 << 20
MAX_FRAME_SAMPLES = 1 << 22
LOOPBACK = ("127.0.0.1", "localhost", "::1")


@dataclass(frozen=True)
class StreamHeader:
    """What a source carries: channel names, one sample rate in Hz, units per channel."""

    channels: tuple[str, ...]
    sample_rate_hz: float
    units: tuple[str, ...] = ()

    def __post_init__(self):
        if not self.channels or len(set(self.channels)) != len(self.channels):
            raise InputError(invalid_value("channels", list(self.channels),
                                           "one or more distinct channel names"))
        if bad := out_of_range(self.sample_rate_hz, SAMPLE_RATE_HZ):
            raise InputError(f"stream header: 'sample_rate_hz': {bad}")
        if bad := out_of_range(len(self.channels), CHANNELS):
            raise InputError(f"stream header: 'channels': {bad}")
        if self.units and len(self.units) != len(self.channels):
            raise InputError(invalid_value("units", list(self.units),
                                           f"one unit per channel ({len(self.channels)})"))


class Source(ABC):
    """Base class of live data sources (drivers). See the module doc for the contract."""

    #: Shown as the run's source name.
    name: str = "source"

    @abstractmethod
    def open(self) -> StreamHeader:
        """Connect and say what the stream carries."""

    @abstractmethod
    def blocks(self) -> Iterator[np.ndarray]:
        """Yield blocks (n_channels, n) in order; return at the end of the run."""

    def close(self) -> None:
        """Release the connection (called once, also after an error)."""


# ----------------------------------------------------------------------------- replay
class ReplaySource(Source):
    """Play an importable file back at ``speed`` x real time (0: as fast as possible)."""

    def __init__(self, path: str | Path, data: DataSpec | None = None, *, speed: float = 1.0,
                 block_s: float = 0.05):
        if not (np.isfinite(speed) and speed >= 0):
            raise ConfigError(invalid_value("speed", speed, "a factor >= 0 (0: unpaced)"))
        self.path = Path(path)
        self.data = data or DataSpec()
        self.speed = float(speed)
        self.block_s = float(block_s)
        self.name = f"replay of {self.path.name}"
        self._reader = None

    def open(self) -> StreamHeader:
        from rundash.ingest import open_reader
        self._reader = open_reader(self.path, self.data)
        r = self._reader
        return StreamHeader(channels=tuple(r.channels), sample_rate_hz=r.sample_rate_hz,
                            units=())

    def blocks(self) -> Iterator[np.ndarray]:
        r = self._reader
        fs = r.sample_rate_hz
        n_block = max(1, int(round(self.block_s * fs)))
        t0 = time.monotonic()
        sent = 0
        for big, _ in r.blocks(max(n_block, 1 << 14)):
            for a in range(0, big.shape[1], n_block):
                b = big[:, a:a + n_block]
                if self.speed > 0:
                    due = t0 + (sent + b.shape[1]) / fs / self.speed
                    wait = due - time.monotonic()
                    if wait > 0:
                        time.sleep(wait)
                sent += b.shape[1]
                yield b

    def close(self) -> None:
        if self._reader is not None:
            self._reader.close()


# ----------------------------------------------------------------------------- folder
END_MARKER = "end-of-run"


class FolderSource(Source):
    """Files dropped into a folder, taken in name order, each once (see module doc)."""

    def __init__(self, folder: str | Path, data: DataSpec | None = None, *,
                 poll_s: float = 0.5, idle_timeout_s: float = 30.0):
        self.folder = Path(folder)
        if not self.folder.is_dir():
            raise InputError(f"{self.folder}: not a folder to watch")
        self.data = data or DataSpec()
        self.poll_s = float(poll_s)
        self.idle_timeout_s = float(idle_timeout_s)
        self.name = f"folder {self.folder.name}"
        self._taken: set[str] = set()
        self._first: Path | None = None
        self.header: StreamHeader | None = None
        self.files_taken: list[str] = []

    def _candidates(self) -> list[Path]:
        from rundash.ingest import FORMAT_BY_SUFFIX
        out = []
        for p in sorted(self.folder.iterdir()):
            if p.name in self._taken or not p.is_file():
                continue
            fmt = FORMAT_BY_SUFFIX.get(p.suffix.lower())
            if fmt is None or (self.data.format != "auto" and fmt != self.data.format):
                continue  # not a data file of the format read (partial, notes, ...)
            out.append(p)
        return out

    def _next_file(self) -> Path | None:
        """The next settled file, or None at the end of the run."""
        sizes: dict[str, int] = {}
        last_new = time.monotonic()
        while True:
            if (self.folder / END_MARKER).exists() and not self._candidates():
                return None
            cands = self._candidates()
            if cands:
                p = cands[0]
                size = p.stat().st_size
                # settled: the same non-zero size on two polls, or a later file exists
                if size > 0 and (sizes.get(p.name) == size or len(cands) > 1):
                    self._taken.add(p.name)
                    return p
                sizes[p.name] = size
                last_new = time.monotonic()
            elif time.monotonic() - last_new > self.idle_timeout_s:
                return None
            time.sleep(self.poll_s)

    def open(self) -> StreamHeader:
        from rundash.ingest import open_reader
        self._first = self._next_file()
        if self._first is None:
            raise InputError(f"{self.folder}: the run ended before any data file arrived")
        with open_reader(self._first, self.data) as r:
            self.header = StreamHeader(channels=tuple(r.channels),
                                       sample_rate_hz=r.sample_rate_hz)
        return self.header

    def blocks(self) -> Iterator[np.ndarray]:
        from rundash.ingest import open_reader
        path = self._first
        while path is not None:
            with open_reader(path, self.data) as r:
                if tuple(r.channels) != self.header.channels or \
                        r.sample_rate_hz != self.header.sample_rate_hz:
                    raise InputError(
                        f"{path.name}: channels {list(r.channels)} at {r.sample_rate_hz:g} Hz "
                        f"do not continue the run (expected {list(self.header.channels)} at "
                        f"{self.header.sample_rate_hz:g} Hz)")
                self.files_taken.append(path.name)
                for b, _ in r.blocks():
                    yield b
            path = self._next_file()


# ----------------------------------------------------------------------------- tcp
def encode_header(header: StreamHeader) -> bytes:
    """The stream header bytes of a :class:`StreamHeader` (see the module doc)."""
    units = header.units or ("",) * len(header.channels)
    body = json.dumps({"sample_rate_hz": header.sample_rate_hz,
                       "channels": [{"name": c, "units": u}
                                    for c, u in zip(header.channels, units)]}).encode()
    return MAGIC + bytes([VERSION, 0, 0, 0]) + struct.pack("<I", len(body)) + body


def encode_frame(block) -> bytes:
    """One frame of a block (n_channels, n) (see the module doc); n = 0 ends the run."""
    x = np.asarray(block, dtype="<f4")
    if x.ndim != 2:
        raise InputError(invalid_value("block", f"array of shape {x.shape}",
                                       "shape (n_channels, n_samples)"))
    return FRAME_MAGIC + struct.pack("<HI", x.shape[0], x.shape[1]) + x.T.tobytes()


def end_frame(n_channels: int) -> bytes:
    return FRAME_MAGIC + struct.pack("<HI", n_channels, 0)


def decode_header(body: bytes) -> StreamHeader:
    """A :class:`StreamHeader` from the JSON part of a stream header."""
    try:
        h = json.loads(body.decode("utf-8"))
        fs = float(h["sample_rate_hz"])
        chans = h["channels"]
        names = tuple(str(c["name"]) for c in chans)
        units = tuple(str(c.get("units", "")) for c in chans)
    except (UnicodeDecodeError, json.JSONDecodeError, KeyError, TypeError, ValueError) as exc:
        raise InputError(f"stream header: not the expected JSON with 'sample_rate_hz' and "
                         f"'channels' (a list of {{'name', 'units'}}): {exc}") from None
    return StreamHeader(channels=names, sample_rate_hz=fs, units=units)


class _Reader:
    """Exact reads with a deadline: each piece of the stream (the header, each frame) must
    arrive whole within ``limit_s`` of the moment it is asked for, however the sender
    splits it (a sender trickling one byte at a time cannot hold the recorder)."""

    def __init__(self, sock: socket.socket, limit_s: float):
        self.sock = sock
        self.limit_s = float(limit_s)
        self.deadline = time.monotonic() + self.limit_s

    def start(self) -> None:
        """Start the clock for the next piece."""
        self.deadline = time.monotonic() + self.limit_s

    def exact(self, n: int, what: str) -> bytes:
        buf = bytearray()
        while len(buf) < n:
            left = self.deadline - time.monotonic()
            try:
                if left <= 0:
                    raise socket.timeout
                self.sock.settimeout(left)
                part = self.sock.recv(min(n - len(buf), 1 << 20))
            except socket.timeout:
                raise InputError(f"stream: {what} did not arrive whole within "
                                 f"{self.limit_s:g} s ({len(buf)} of {n} bytes came)") from None
            if not part:
                if not buf:
                    raise EOFError
                raise InputError(f"stream: {what} is short: the connection closed after "
                                 f"{len(buf)} of {n} bytes")
            buf += part
        return bytes(buf)


class TcpSource(Source):
    """Listen on a loopback port and take one sender's stream (framing: module doc).

    The listener is closed as soon as the first sender is accepted, so a second sender is
    refused at once (connection refused) instead of queueing data nobody reads. The header
    and every frame must each arrive whole within ``read_timeout_s`` of the moment the
    recorder waits for them.
    """

    def __init__(self, host: str, port: int, *, accept_timeout_s: float = 60.0,
                 read_timeout_s: float = 30.0):
        if host not in LOOPBACK:
            raise ConfigError(invalid_value("host", host, "a loopback address (127.0.0.1, "
                                            "localhost or ::1): the stream is not "
                                            "authenticated"))
        if not (0 <= int(port) < 65536):
            raise ConfigError(invalid_value("port", port, "a TCP port 0-65535"))
        self.host, self.port = host, int(port)
        self.accept_timeout_s = accept_timeout_s
        self.read_timeout_s = read_timeout_s
        self.name = f"tcp {host}:{port}"
        self.frames = 0
        family = socket.AF_INET6 if ":" in host else socket.AF_INET
        self._server = socket.socket(family, socket.SOCK_STREAM)
        self._server.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        self._server.bind((host, self.port))
        self._server.listen(1)
        self.port = self._server.getsockname()[1]  # the one bound when port 0 was asked
        self._conn: socket.socket | None = None
        self._rd: _Reader | None = None
        self.header: StreamHeader | None = None
        self.ended_cleanly = False

    def open(self) -> StreamHeader:
        self._server.settimeout(self.accept_timeout_s)
        try:
            conn, _ = self._server.accept()
        except socket.timeout:
            raise InputError(f"stream: no sender connected to {self.host}:{self.port} within "
                             f"{self.accept_timeout_s:g} s") from None
        finally:
            # one sender per run: a later one is refused, not queued in the backlog
            self._server.close()
        self._conn = conn
        rd = self._rd = _Reader(conn, self.read_timeout_s)
        try:
            head = rd.exact(12, "header")
        except EOFError:
            raise InputError("stream: the sender closed before sending a header") from None
        if head[:4] != MAGIC:
            raise InputError(f"stream header: bad start {head[:4]!r}, expected {MAGIC!r} "
                             "(not a rundash stream)")
        if head[4] != VERSION:
            raise InputError(f"stream header: version {head[4]}, expected {VERSION}")
        (length,) = struct.unpack("<I", head[8:12])
        if not 0 < length <= MAX_HEADER_BYTES:
            raise InputError(f"stream header: JSON length {length}, expected 1-"
                             f"{MAX_HEADER_BYTES} bytes")
        try:
            self.header = decode_header(rd.exact(length, "header JSON"))
        except EOFError:
            raise InputError("stream header: the connection closed inside the header") from None
        return self.header

    def blocks(self) -> Iterator[np.ndarray]:
        rd = self._rd
        n_ch = len(self.header.channels)
        while True:
            k = self.frames + 1
            rd.start()
            try:
                fh = rd.exact(8, f"frame {k} header")
            except EOFError:
                raise InputError(f"stream: the connection closed after frame {self.frames} "
                                 "without the end-of-run frame") from None
            if fh[:2] != FRAME_MAGIC:
                raise InputError(f"stream: frame {k} starts with {fh[:2]!r}, expected "
                                 f"{FRAME_MAGIC!r} (lost step with the framing)")
            ch, n = struct.unpack("<HI", fh[2:])
            if ch != n_ch:
                raise InputError(f"stream: frame {k} has {ch} channels, the header named "
                                 f"{n_ch}")
            if n == 0:
                self.ended_cleanly = True
                return
            if n > MAX_FRAME_SAMPLES:
                raise InputError(f"stream: frame {k} claims {n} samples per channel, more than "
                                 f"{MAX_FRAME_SAMPLES}")
            try:
                body = rd.exact(4 * n * n_ch, f"frame {k}")
            except EOFError:  # pragma: no cover - exact() raises InputError once data came
                raise InputError(f"stream: frame {k} is missing") from None
            self.frames = k
            yield np.frombuffer(body, dtype="<f4").reshape(n, n_ch).T

    def close(self) -> None:
        for s in (self._conn, self._server):
            if s is not None:
                try:
                    s.close()
                except OSError:  # pragma: no cover
                    pass


# ----------------------------------------------------------------------------- parsing
def parse_source(text: str, data: DataSpec | None = None) -> Source:
    """A :class:`Source` from its command-line text (see the module doc)."""
    allowed = ("replay:PATH[@SPEED], folder:DIR, tcp:127.0.0.1:PORT or "
               "python:MODULE:FACTORY[=ARG]")
    kind, sep, rest = text.partition(":")
    if not sep or not rest:
        raise ConfigError(invalid_value("source", text, allowed))
    if kind == "replay":
        path, at, speed = rest.rpartition("@")
        if not at:
            path, speed = rest, "1"
        try:
            factor = float(speed)
        except ValueError:
            raise ConfigError(invalid_value("source", text, "replay:PATH@SPEED with SPEED a "
                                            "number such as 1, 20 or 0 (unpaced)")) from None
        return ReplaySource(path, data, speed=factor)
    if kind == "folder":
        return FolderSource(rest, data)
    if kind == "tcp":
        host, _, port = rest.rpartition(":")
        try:
            port_number = int(port)
        except ValueError:
            raise ConfigError(invalid_value("source", text, "tcp:127.0.0.1:PORT")) from None
        return TcpSource(host.strip("[]"), port_number)  # its own refusals name the key
    if kind == "python":
        mod, _, rest2 = rest.partition(":")
        factory, eq, arg = rest2.partition("=")
        try:
            obj = getattr(importlib.import_module(mod), factory)
        except (ImportError, AttributeError, ValueError) as exc:
            raise ConfigError(f"source {text!r}: cannot load {factory!r} from module "
                              f"{mod!r}: {exc}") from None
        src = obj(arg) if eq else obj()
        if not isinstance(src, Source):
            raise ConfigError(invalid_value("source", text, f"a factory returning a "
                                            f"rundash Source, got {type(src).__name__}"))
        return src
    raise ConfigError(invalid_value("source", text, allowed))
