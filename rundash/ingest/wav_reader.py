"""WAV reader: RIFF/WAVE, multichannel PCM 16/24/32-bit and IEEE float 32/64.

The file is parsed here (not loaded whole): the ``fmt `` chunk gives the layout and the
``data`` chunk is read frame block by frame block. PCM is normalised to [-1, 1) and
multiplied by ``[data].full_scale_v``; float data is multiplied by it too. Channels are
named ``ch1`` ... ``chN`` in file order.
"""

from __future__ import annotations

import struct
from typing import Iterator

import numpy as np

from rundash.ingest.base import DEFAULT_BLOCK, Reader

_PCM, _FLOAT, _EXTENSIBLE = 1, 3, 0xFFFE


class WavReader(Reader):
    format = "wav"

    def __init__(self, path, data=None):
        super().__init__(path, data)
        with open(self.path, "rb") as fh:
            riff = fh.read(12)
            if len(riff) < 12 or riff[:4] not in (b"RIFF", b"RF64") or riff[8:12] != b"WAVE":
                raise self.fail("not a RIFF/WAVE file (expected the 'RIFF....WAVE' header)")
            fmt = None
            ds64_data = None  # RF64: the data size from the 'ds64' chunk
            pos = 12
            while True:
                fh.seek(pos)
                hdr = fh.read(8)
                if len(hdr) < 8:
                    if fmt is None or not hasattr(self, "_data_offset"):
                        raise self.fail("no 'data' chunk found (truncated file?)")
                    break  # the end of the file after the data chunk
                cid, size = hdr[:4], struct.unpack("<I", hdr[4:])[0]
                if cid == b"fmt ":
                    if fmt is not None:
                        raise self.fail(f"a second 'fmt ' chunk at byte {pos}; expected one "
                                        "'fmt ' chunk (which layout holds is not clear)")
                    body = fh.read(size)
                    if len(body) < 16:
                        raise self.fail("'fmt ' chunk too short")
                    tag, nch, fs, _, align, bits = struct.unpack("<HHIIHH", body[:16])
                    if tag == _EXTENSIBLE and len(body) >= 26:
                        tag = struct.unpack("<H", body[24:26])[0]
                    fmt = (tag, nch, fs, align, bits)
                elif cid == b"ds64" and riff[:4] == b"RF64":
                    body = fh.read(min(size, 28))
                    if len(body) >= 16:
                        ds64_data = struct.unpack("<Q", body[8:16])[0]
                elif cid == b"data":
                    if fmt is None:
                        raise self.fail("'data' chunk before the 'fmt ' chunk")
                    if hasattr(self, "_data_offset"):
                        raise self.fail(f"a second 'data' chunk at byte {pos}; expected one "
                                        "'data' chunk (a second one would be dropped)")
                    if size == 0xFFFFFFFF and ds64_data is not None:
                        size = ds64_data
                    self._data_offset = pos + 8
                    self._data_size = size
                    if pos + 8 + size > self.size_bytes:
                        break  # truncated: refused below with the sizes
                pos += 8 + size + (size % 2)
                if hasattr(self, "_data_offset") and pos + 8 > self.size_bytes:
                    break
        tag, nch, fs, align, bits = fmt
        if tag == _PCM and bits in (16, 24, 32):
            self._kind = "pcm"
        elif tag == _FLOAT and bits in (32, 64):
            self._kind = "float"
        else:
            raise self.fail(f"unsupported WAV encoding (format tag {tag}, {bits} bits); expected "
                            "PCM 16/24/32-bit or IEEE float 32/64-bit")
        if nch < 1 or align != nch * bits // 8:
            raise self.fail(f"inconsistent WAV header: {nch} channels, block align {align}, "
                            f"{bits} bits")
        self._bits = bits
        self._align = align
        self.sample_rate_hz = self._agree_rate(self._check_rate(float(fs), "WAV header"),
                                               "WAV header")
        self.time_note = f"{self.sample_rate_hz:.10g} Hz from the WAV header"
        available = self.size_bytes - self._data_offset
        if self._data_size > available:
            raise self.fail(f"truncated: the header declares {self._data_size} data bytes but "
                            f"only {available} are in the file")
        self.n_samples = self._data_size // align
        if self.n_samples == 0:
            raise self.fail("header only: the data chunk holds no samples")
        self.channels = tuple(f"ch{i + 1}" for i in range(nch))
        self._scale = float(self.data.full_scale_v)

    def _decode(self, raw: bytes, n: int) -> np.ndarray:
        """The selected channels of ``n`` frames, (n_selected, n), a fresh array."""
        nch = len(self.channels)
        sel = self.selected
        # float32 wherever it holds the file's samples exactly (PCM 16/24-bit, float32)
        if self._kind == "float" or self._bits in (16, 32):
            code = {("float", 32): "<f4", ("float", 64): "<f8", ("pcm", 16): "<i2",
                    ("pcm", 32): "<i4"}[(self._kind, self._bits)]
            frames = np.frombuffer(raw, dtype=code).reshape(n, nch)
            out_t = np.float64 if code in ("<f8", "<i4") else np.float32
            scale = self._scale if self._kind == "float" else self._scale / 2.0 ** (
                self._bits - 1)
            out = np.empty((len(sel), n), dtype=out_t)
            with np.errstate(over="ignore", invalid="ignore"):  # the importer names inf/NaN
                for j, c in enumerate(sel):
                    np.multiply(frames[:, c], out_t(scale), out=out[j], casting="unsafe")
            return out
        # 24-bit: widen each 3-byte sample to 4 bytes, sign from the top byte
        b = np.frombuffer(raw, dtype=np.uint8).reshape(n, nch, 3)
        out = np.empty((len(sel), n), dtype=np.float32)
        w = np.zeros((n, 4), dtype=np.uint8)
        for j, c in enumerate(sel):
            w[:, 1:] = b[:, c]
            np.multiply(w.view("<i4").ravel(), np.float32(self._scale / 2147483648.0),
                        out=out[j], casting="unsafe")
        return out

    def blocks(self, block_size: int = DEFAULT_BLOCK) -> Iterator[tuple[np.ndarray, float]]:
        done = 0
        total = self.n_samples
        with open(self.path, "rb") as fh:
            fh.seek(self._data_offset)
            while done < total:
                n = min(block_size, total - done)
                raw = fh.read(n * self._align)
                if len(raw) < n * self._align:
                    raise self.fail(f"truncated at sample {done}")
                block = self._decode(raw, n)
                done += n
                yield block, done / total
