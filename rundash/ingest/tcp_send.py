"""A small sender for the recorder's TCP stream (framing: :mod:`rundash.ingest.sources`).

As a command, it plays an importable file to a listening recorder::

    rundash record --machine k101.toml --source tcp:127.0.0.1:9400 &
    python -m rundash.ingest.tcp_send run.wav --port 9400 --speed 1

As a library, :class:`StreamSender` is what a DAQ integration needs::

    from rundash.ingest.tcp_send import StreamSender
    with StreamSender("127.0.0.1", 9400, ["tach", "x1", "y1"], 25600.0,
                      units=["V", "V", "V"]) as s:
        while daq_running():
            s.send(read_block())        # (3, n) array, any n >= 1
    # leaving the block sends the end-of-run frame
"""

from __future__ import annotations

import argparse
import socket
import sys
import time
from typing import Sequence

from rundash.errors import RundashError
from rundash.ingest.sources import StreamHeader, encode_frame, encode_header, end_frame


class StreamSender:
    """Connect to a listening recorder, send the header, then blocks, then the end."""

    def __init__(self, host: str, port: int, channels: Sequence[str], sample_rate_hz: float,
                 *, units: Sequence[str] = (), connect_timeout_s: float = 10.0):
        self.header = StreamHeader(channels=tuple(channels), sample_rate_hz=float(sample_rate_hz),
                                   units=tuple(units))
        deadline = time.monotonic() + connect_timeout_s
        while True:  # the recorder may still be starting: retry until the deadline
            try:
                self.sock = socket.create_connection((host, port), timeout=connect_timeout_s)
                break
            except (ConnectionRefusedError, OSError):
                if time.monotonic() > deadline:
                    raise
                time.sleep(0.1)
        self.sock.sendall(encode_header(self.header))

    def send(self, block) -> None:
        """Send one block of shape (n_channels, n)."""
        self.sock.sendall(encode_frame(block))

    def end(self) -> None:
        """Send the end-of-run frame and close."""
        try:
            self.sock.sendall(end_frame(len(self.header.channels)))
        finally:
            self.sock.close()

    def __enter__(self):
        return self

    def __exit__(self, exc_type, *_):
        if exc_type is None:
            self.end()
        else:
            self.sock.close()


def send_file(path, host: str = "127.0.0.1", port: int = 9400, *, speed: float = 1.0,
              block_s: float = 0.05, data=None) -> int:
    """Play an importable file to a recorder at ``speed`` x real time; return samples sent."""
    from rundash.ingest.sources import ReplaySource

    src = ReplaySource(path, data, speed=speed, block_s=block_s)
    h = src.open()
    n = 0
    try:
        with StreamSender(host, port, h.channels, h.sample_rate_hz, units=h.units) as s:
            for b in src.blocks():
                s.send(b)
                n += b.shape[1]
    finally:
        src.close()
    return n


def main(argv: Sequence[str] | None = None) -> int:
    p = argparse.ArgumentParser(prog="python -m rundash.ingest.tcp_send",
                                description="Play a data file to a recorder listening on a "
                                            "loopback TCP port.")
    p.add_argument("data", help="data file (.csv, .wav, .h5, .parquet)")
    p.add_argument("--host", default="127.0.0.1")
    p.add_argument("--port", type=int, default=9400)
    p.add_argument("--speed", type=float, default=1.0,
                   help="x real time (default 1; 0 = as fast as possible)")
    p.add_argument("--machine", help="machine description, for its [data] table (CSV rate, "
                                     "WAV scale)")
    a = p.parse_args(argv)
    data = None
    try:
        if a.machine:
            from rundash.ingest.machine_file import load_machine_description
            data = load_machine_description(a.machine)[0].data
        n = send_file(a.data, a.host, a.port, speed=a.speed, data=data)
    except (RundashError, OSError) as exc:
        print(f"tcp_send: error: {exc}", file=sys.stderr)
        return 1
    print(f"sent {n} samples per channel", file=sys.stderr)
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
