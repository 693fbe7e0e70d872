"""How arrays travel: .npy bytes (never pickled) and their content hash."""

import hashlib
import io
import json
from typing import Any

import numpy as np

__all__ = ["to_npy_bytes", "from_npy_bytes", "array_sha256", "canonical_sha256"]


def to_npy_bytes(array: np.ndarray) -> bytes:
    """Serialise ``array`` in the .npy format (NEP 1); object arrays are refused."""
    buffer = io.BytesIO()
    np.save(buffer, np.ascontiguousarray(array), allow_pickle=False)
    return buffer.getvalue()


def from_npy_bytes(data: bytes) -> np.ndarray:
    """Read .npy bytes; ``allow_pickle=False`` so no bytes are ever unpickled."""
    array: np.ndarray = np.load(io.BytesIO(data), allow_pickle=False)
    return array


def array_sha256(array: np.ndarray) -> str:
    """SHA-256 of the ASCII shape ('n,d;') then the values as little-endian float64, C order."""
    values = np.ascontiguousarray(array, dtype="<f8")
    digest = hashlib.sha256(",".join(str(s) for s in values.shape).encode("ascii") + b";")
    digest.update(values.tobytes())
    return digest.hexdigest()


def canonical_sha256(document: Any) -> str:
    """SHA-256 of the canonical JSON of ``document``: sorted keys, no spaces, UTF-8."""
    text = json.dumps(document, sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()
