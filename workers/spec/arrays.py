"""How arrays travel: .npy bytes (never pickled) and their content hash."""

import hashlib
import io
import json
import math
from decimal import Decimal
from typing import Any

import numpy as np

__all__ = [
    "array_sha256",
    "canonical_json",
    "canonical_sha256",
    "diagram_rows",
    "diagrams_of_rows",
    "from_npy_bytes",
    "result_array",
    "result_diagrams",
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


HASH_CHUNK = 1 << 20
"""Values converted to float64 at a time while hashing, so a large uint8 volume is never
copied whole as float64."""


def array_sha256(array: np.ndarray) -> str:
    """SHA-256 of the ASCII shape (sizes joined by ',', then ';') then the values as
    little-endian float64 in C order, whatever dtype the array holds."""
    flat = np.ascontiguousarray(array).reshape(-1)
    digest = hashlib.sha256(",".join(str(s) for s in array.shape).encode("ascii") + b";")
    for start in range(0, flat.size, HASH_CHUNK):
        digest.update(flat[start : start + HASH_CHUNK].astype("<f8").tobytes())
    return digest.hexdigest()


def canonical_sha256(document: Any) -> str:
    """SHA-256 of the canonical JSON of ``document`` (RFC 8785, UTF-8)."""
    return hashlib.sha256(canonical_json(document).encode("utf-8")).hexdigest()


def canonical_json(document: Any) -> str:
    """``document`` in the JSON Canonicalization Scheme (RFC 8785).

    Keys sorted, no white space, strings escaped as JSON.stringify does, and numbers written
    as ECMAScript writes them (1.0 -> 1, 1e-7 -> 1e-7, 0.00001 -> 0.00001), so a client in any
    language with a JCS library gets the same text, and the same hash, for the same document.
    """
    if isinstance(document, dict):
        items = sorted(document.items())
        return "{" + ",".join(f"{_string(k)}:{canonical_json(v)}" for k, v in items) + "}"
    if isinstance(document, list | tuple):
        return "[" + ",".join(canonical_json(item) for item in document) + "]"
    if isinstance(document, str):
        return _string(document)
    if document is None or isinstance(document, bool):
        return json.dumps(document)
    if isinstance(document, int):
        return str(document)
    if isinstance(document, float):
        return _number(document)
    raise TypeError(f"not JSON: {type(document).__name__}")


def _string(text: str) -> str:
    return json.dumps(text, ensure_ascii=False)


def _number(value: float) -> str:
    """ECMAScript's Number::toString (ECMA-262, 7.1.12.1), as RFC 8785 requires."""
    if not math.isfinite(value):
        raise ValueError("JSON has no NaN or Infinity")
    if value == 0:
        return "0"
    sign = "-" if value < 0 else ""
    # repr gives the shortest digits that round-trip, as ECMAScript does.
    _, digit_tuple, exponent = Decimal(repr(abs(value))).normalize().as_tuple()
    digits = "".join(map(str, digit_tuple))
    k, n = len(digits), int(exponent) + len(digits)  # value = 0.digits * 10**n
    if k <= n <= 21:
        text = digits + "0" * (n - k)
    elif 0 < n <= 21:
        text = digits[:n] + "." + digits[n:]
    elif -6 < n <= 0:
        text = "0." + "0" * -n + digits
    else:
        mantissa = digits if k == 1 else digits[0] + "." + digits[1:]
        text = f"{mantissa}e{'+' if n - 1 >= 0 else '-'}{abs(n - 1)}"
    return sign + text


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


def result_array(result: dict[str, Any]) -> np.ndarray | None:
    """The array a result (as JSON) has in binary form, or None when it has none.

    A job's result: its concatenated feature vector (length ``vector_length``). A distance
    result: the N x N matrix, with inf where classes that never die cannot be matched and NaN
    where a cosine distance is undefined (both null in JSON).
    """
    if "matrix" in result:
        missing = np.nan if result["metric"] == "cosine" else np.inf
        return np.array(
            [[missing if v is None else v for v in row] for row in result["matrix"]],
            dtype="<f8",
        ).reshape(result["count"], result["count"])
    vectors = result.get("vectors") or []
    if not vectors:
        return None
    return np.concatenate([np.asarray(v["values"], dtype="<f8") for v in vectors])


def result_diagrams(result: dict[str, Any], direction: int | None = None) -> list[np.ndarray]:
    """A job result's diagrams (as JSON) as arrays: item k holds the (n_k, 2) float64 pairs
    of dimension k, deaths that are null (never) as inf; dimensions the job did not compute
    up to the highest it did are empty. ``direction`` picks one diagram set of a result with
    one per direction (``per_direction``)."""
    if direction is None:
        if result.get("per_direction"):
            raise ValueError("the result has one diagram set per direction: pick a direction")
        diagrams = result.get("diagrams") or []
    else:
        diagrams = result["per_direction"][direction]["diagrams"]
    by_dim = {item["dim"]: item["pairs"] for item in diagrams}
    return [
        np.array(
            [[birth, np.inf if death is None else death] for birth, death in by_dim.get(k, [])],
            dtype=np.float64,
        ).reshape(-1, 2)
        for k in range(max(by_dim, default=-1) + 1)
    ]
