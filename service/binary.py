"""The binary form of results: one array as NumPy .npy bytes (``application/x-npy``).

Chosen once for every binary array lacuna sends (and, later, takes): the .npy format
(NEP 1) is read by numpy, and by small readers in R, Julia and Java; it carries shape and
dtype, and is never pickled. Values are little-endian float64 in C order.
"""

import numpy as np
from flask import Request

from workers.spec import NPY_MEDIA_TYPE
from workers.spec.arrays import result_array, to_npy_bytes

__all__ = ["NPY_MEDIA_TYPE", "npy_bytes", "result_array", "wants_npy"]


def wants_npy(request: Request) -> bool:
    """Does the client prefer .npy to JSON (Accept header, RFC 9110 content negotiation)?"""
    accept = request.accept_mimetypes
    return bool(accept) and accept.best_match(["application/json", NPY_MEDIA_TYPE]) == (
        NPY_MEDIA_TYPE
    )


def npy_bytes(array: np.ndarray) -> bytes:
    """``array`` as .npy bytes, little-endian float64."""
    return to_npy_bytes(np.ascontiguousarray(array, dtype="<f8"))
