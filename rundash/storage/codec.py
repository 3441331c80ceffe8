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


def decode_f64(b: bytes) -> np.ndarray:
    return np.frombuffer(b, dtype="<f8")
