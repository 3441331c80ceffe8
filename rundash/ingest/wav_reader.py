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
            while True:
                hdr = fh.read(8)
                if len(hdr) < 8:
                    raise self.fail("no 'data' chunk found (truncated file?)")
                cid, size = hdr[:4], struct.unpack("<I", hdr[4:])[0]
                if cid == b"fmt ":
                    body = fh.read(size)
                    if len(body) < 16:
                        raise self.fail("'fmt ' chunk too short")
                    tag, nch, fs, _, align, bits = struct.unpack("<HHIIHH", body[:16])
                    if tag == _EXTENSIBLE and len(body) >= 26:
                        tag = struct.unpack("<H", body[24:26])[0]
                    fmt = (tag, nch, fs, align, bits)
                    if size % 2:
                        fh.read(1)
                elif cid == b"data":
                    if fmt is None:
                        raise self.fail("'data' chunk before the 'fmt ' chunk")
                    self._data_offset = fh.tell()
                    self._data_size = size
                    break
                else:
                    fh.seek(size + (size % 2), 1)
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
        nch = len(self.channels)
        # float32 wherever it holds the file's samples exactly (PCM 16/24-bit, float32)
        if self._kind == "float":
            x = np.frombuffer(raw, dtype="<f4" if self._bits == 32 else "<f8")
            with np.errstate(over="ignore", invalid="ignore"):  # the importer names inf/NaN
                x = x * x.dtype.type(self._scale)
        elif self._bits == 16:
            x = np.frombuffer(raw, dtype="<i2").astype(np.float32) * np.float32(
                self._scale / 32768.0)
        elif self._bits == 32:
            x = np.frombuffer(raw, dtype="<i4") * (self._scale / 2147483648.0)
        else:  # 24-bit: widen each 3-byte sample to 4 bytes, sign from the top byte
            b = np.frombuffer(raw, dtype=np.uint8).reshape(-1, 3)
            w = np.zeros((b.shape[0], 4), dtype=np.uint8)
            w[:, 1:] = b
            x = w.view("<i4").ravel().astype(np.float32) * np.float32(
                self._scale / 2147483648.0)
        return x.reshape(n, nch).T

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
