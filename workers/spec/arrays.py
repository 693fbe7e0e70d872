"""How arrays travel: .npy bytes (never pickled) and their content hash."""

import hashlib
import io
import json
from typing import Any

import numpy as np

__all__ = [
    "array_sha256",
    "canonical_sha256",
    "diagram_rows",
    "diagrams_of_rows",
    "from_npy_bytes",
    "to_npy_bytes",
]


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


def diagram_rows(diagrams: list[tuple[int, list[tuple[float, float | None]]]]) -> np.ndarray:
    """(label, pairs) items as one (k, 3) float64 array of (label, birth, death); null -> inf.

    The label is a homology dimension (a job's given diagrams) or a position (the diagrams of
    a distance matrix).
    """
    rows = [
        (label, birth, np.inf if death is None else death)
        for label, pairs in diagrams
        for birth, death in pairs
    ]
    return np.array(rows, dtype=np.float64).reshape(-1, 3)


def diagrams_of_rows(rows: np.ndarray, labels: list[int]) -> dict[int, np.ndarray]:
    """Inverse of ``diagram_rows``: label -> (k, 2) pairs, for each of ``labels``."""
    rows = np.asarray(rows, dtype=np.float64).reshape(-1, 3)
    rows = rows[np.argsort(rows[:, 0], kind="stable")]
    starts = np.searchsorted(rows[:, 0], labels, side="left")
    stops = np.searchsorted(rows[:, 0], labels, side="right")
    return {
        label: rows[start:stop, 1:]
        for label, start, stop in zip(labels, starts, stops, strict=True)
    }
