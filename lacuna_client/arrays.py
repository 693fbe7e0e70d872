"""The arrays of the wire format, read and written on the client's side.

The server's models live in ``workers.spec``, which the client never imports (it installs
without pydantic); these few functions read the same JSON. ``tests/client/test_arrays.py``
checks them against the server's own readers.
"""

import io
from typing import Any

import numpy as np

__all__ = ["pairs_array", "result_array", "result_diagrams", "to_npy_bytes"]


def to_npy_bytes(array: np.ndarray) -> bytes:
    """``array`` in the .npy format (NEP 1), as uploads carry it; object arrays are refused."""
    buffer = io.BytesIO()
    np.save(buffer, np.ascontiguousarray(array), allow_pickle=False)
    return buffer.getvalue()


def pairs_array(pairs: list[list[float | None]]) -> np.ndarray:
    """JSON (birth, death) pairs as an (n, 2) float64 array; a null death (never) is inf."""
    rows = [(birth, np.inf if death is None else death) for birth, death in pairs]
    return np.array(rows, dtype=np.float64).reshape(-1, 2)


def result_diagrams(result: dict[str, Any], direction: int | None = None) -> list[np.ndarray]:
    """A job result's diagrams: item k is ``pairs_array`` of dimension k, empty for a
    dimension below the highest that has no pairs. ``direction`` picks one set of a result
    with one set per direction (``per_direction``); without it such a result is a
    ValueError."""
    if direction is not None:
        listed = result["per_direction"][direction]["diagrams"]
    elif result.get("per_direction"):
        raise ValueError("the result has one diagram set per direction: pick a direction")
    else:
        listed = result.get("diagrams") or []
    by_dim = {item["dim"]: item["pairs"] for item in listed}
    return [pairs_array(by_dim.get(dim, [])) for dim in range(max(by_dim, default=-1) + 1)]


def result_array(result: dict[str, Any]) -> np.ndarray | None:
    """The array a result holds: a distance result's N x N matrix (a null entry is NaN for
    the cosine metric, where it is undefined, else inf: classes that never die cannot be
    matched), or a job's concatenated feature vector; None when the job has no vectors."""
    if "matrix" in result:
        missing = np.nan if result["metric"] == "cosine" else np.inf
        rows = [[missing if value is None else value for value in row] for row in result["matrix"]]
        return np.array(rows, dtype="<f8").reshape(result["count"], result["count"])
    values = [np.asarray(vector["values"], dtype="<f8") for vector in result.get("vectors") or []]
    return np.concatenate(values) if values else None
