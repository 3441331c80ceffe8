"""Array <-> blob codec. Little-endian, no header: the row says how many values."""

from __future__ import annotations

import numpy as np


def encode_f32(x) -> bytes:
    """Samples as float32 little-endian bytes (bit-exact for float32 input)."""
    return np.ascontiguousarray(x, dtype="<f4").tobytes()


def decode_f32(b: bytes) -> np.ndarray:
    """float32 samples from :func:`encode_f32` bytes (read-only view)."""
    return np.frombuffer(b, dtype="<f4")


def encode_f64(x) -> bytes:
    return np.ascontiguousarray(x, dtype="<f8").tobytes()


def f32_view(x) -> memoryview:
    """The bytes :func:`encode_f32` gives, as a view of ``x`` itself when it already is
    contiguous little-endian float32 (no copy; a copy only otherwise): a blob value for
    an insert, read by the driver while the array lives."""
    return memoryview(np.ascontiguousarray(x, dtype="<f4")).cast("B")


def f64_view(x) -> memoryview:
    """The bytes :func:`encode_f64` gives, as a view of ``x`` when it already is
    contiguous little-endian float64 (see :func:`f32_view`)."""
    return memoryview(np.ascontiguousarray(x, dtype="<f8")).cast("B")


def decode_f64(b: bytes) -> np.ndarray:
    return np.frombuffer(b, dtype="<f8")
