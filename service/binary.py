"""The binary form of results: one array as NumPy .npy bytes (``application/x-npy``).

Chosen once for every binary array lacuna sends (and, later, takes): the .npy format
(NEP 1) is read by numpy, and by small readers in R, Julia and Java; it carries shape and
dtype, and is never pickled. Values are little-endian float64 in C order.
"""

from typing import Any

import numpy as np
from flask import Request

from workers.spec import NPY_MEDIA_TYPE
from workers.spec.arrays import to_npy_bytes

__all__ = ["NPY_MEDIA_TYPE", "npy_bytes", "result_array", "wants_npy"]


def wants_npy(request: Request) -> bool:
    """Does the client prefer .npy to JSON (Accept header, RFC 9110 content negotiation)?"""
    accept = request.accept_mimetypes
    return bool(accept) and accept.best_match(["application/json", NPY_MEDIA_TYPE]) == (
        NPY_MEDIA_TYPE
    )


def result_array(result: dict[str, Any]) -> np.ndarray | None:
    """The array a result has in binary form, or None when it has none.

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


def npy_bytes(array: np.ndarray) -> bytes:
    """``array`` as .npy bytes, little-endian float64."""
    return to_npy_bytes(np.ascontiguousarray(array, dtype="<f8"))
