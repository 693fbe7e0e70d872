"""Arrays uploaded as files: the multipart convention and the decoders of .npy, TIFF and PNG.

One way in for every binary input: ``multipart/form-data`` with two parts, ``request`` (the
JSON body a JSON request would have, without the array) and ``data`` (the file). The format is
told from the file's first bytes, not from its name or part headers.

Every decoder reads the declared shape and type first and refuses what is over the limits
before allocating the array, so a small file that declares a huge one (a decompression bomb)
costs nothing. Nothing is ever unpickled.
"""

import io
import json
import math
import struct
import warnings
from typing import Any

import numpy as np
import tifffile
from flask import Request
from PIL import Image

from service.errors import BodyNotJson, RequestInvalid
from workers.spec import FieldError, Limits
from workers.spec.pixels import UPLOAD_POINTER

__all__ = ["UPLOAD_FORMATS", "REQUEST_PART", "DATA_PART", "decode_array", "multipart_parts"]

REQUEST_PART = "request"
DATA_PART = "data"

UPLOAD_FORMATS = ("npy", "tiff", "png")
"""Formats accepted as the data part: NumPy .npy (NEP 1, never pickled), TIFF (2D, or a
multi-page stack as 3D; 8/16/32-bit integers and floats) and PNG (grayscale 1/8/16-bit)."""

_NPY_MAGIC = b"\x93NUMPY"
_PNG_MAGIC = b"\x89PNG\r\n\x1a\n"
_TIFF_MAGICS = (b"II*\x00", b"MM\x00*", b"II+\x00", b"MM\x00+")  # classic and BigTIFF

_PNG_MODES = {"1", "L", "I", "I;16", "I;16B", "I;16L", "F"}
"""Single-channel Pillow modes: bilevel, 8-bit, 32-bit integer, 16-bit and float."""


def _refused(message: str) -> RequestInvalid:
    return RequestInvalid([FieldError(pointer=UPLOAD_POINTER, message=message)])


def multipart_parts(request: Request) -> tuple[Any, bytes]:
    """The parsed ``request`` part and the raw bytes of the ``data`` part."""
    text: str | None = request.form.get(REQUEST_PART)
    if text is None and REQUEST_PART in request.files:
        text = request.files[REQUEST_PART].read().decode("utf-8", errors="replace")
    if text is None:
        raise RequestInvalid(
            [
                FieldError(
                    pointer="/" + REQUEST_PART,
                    message=f'a multipart request needs a "{REQUEST_PART}" part holding the '
                    "JSON request",
                )
            ]
        )
    try:
        body = json.loads(text)
    except (ValueError, RecursionError) as error:
        raise BodyNotJson(
            f'the "{REQUEST_PART}" part could not be parsed as JSON: {error}'
        ) from None
    upload = request.files.get(DATA_PART)
    if upload is None:
        raise _refused(f'a multipart request needs a "{DATA_PART}" file part holding the array')
    return body, upload.read()


def decode_array(data: bytes, limits: Limits) -> np.ndarray:
    """The array in an uploaded .npy, TIFF or PNG file, checked against the size limits first.

    Raises RequestInvalid (pointing at ``/data``) for unknown, corrupt or oversized files.
    """
    if data.startswith(_NPY_MAGIC):
        return _npy(data, limits)
    if data.startswith(_TIFF_MAGICS):
        return _tiff(data, limits)
    if data.startswith(_PNG_MAGIC):
        return _png(data, limits)
    raise _refused("the data part is not a .npy, TIFF or PNG file (told from its first bytes)")


def _check_declared(shape: tuple[int, ...], limits: Limits, what: str) -> None:
    """Refuse a declared shape over the limits before anything is allocated."""
    if len(shape) not in (2, 3):
        raise _refused(
            f"the {what} holds a {len(shape)}-dimensional array (shape {list(shape)}); images are "
            "2D (rows, columns) and volumes 3D (planes, rows, columns)"
        )
    size = math.prod(shape)
    limit = limits.max_image_pixels if len(shape) == 2 else limits.max_volume_voxels
    if size > limit:
        kind = "pixels in a 2D image" if len(shape) == 2 else "voxels in a 3D volume"
        raise _refused(
            f"the {what} declares shape {list(shape)}, {size} values, above the limit of "
            f"{limit} {kind}"
        )


def _npy(data: bytes, limits: Limits) -> np.ndarray:
    stream = io.BytesIO(data)
    try:
        version = np.lib.format.read_magic(stream)
        if version == (1, 0):
            shape, _, dtype = np.lib.format.read_array_header_1_0(stream, max_header_size=10_000)
        elif version == (2, 0):
            shape, _, dtype = np.lib.format.read_array_header_2_0(stream, max_header_size=10_000)
        else:  # 3.0 only adds UTF-8 field names, i.e. structured arrays, refused anyway
            raise ValueError(f"format version {version[0]}.{version[1]} is not accepted")
    except (ValueError, SyntaxError, struct.error) as error:
        raise _refused(f"the .npy header cannot be read: {error}") from None
    if dtype.hasobject or dtype.fields is not None or dtype.kind not in "biuf":
        raise _refused(
            f"the .npy file holds {dtype} values; send numbers (bool, integer or floating "
            "point). Object arrays are refused: lacuna never unpickles"
        )
    _check_declared(tuple(shape), limits, ".npy file")
    expected = math.prod(shape) * dtype.itemsize
    if len(data) - stream.tell() != expected:
        raise _refused(
            f"the .npy file declares {expected} bytes of data but holds {len(data) - stream.tell()}"
        )
    try:
        array: np.ndarray = np.load(io.BytesIO(data), allow_pickle=False)
    except ValueError as error:
        raise _refused(f"the .npy file cannot be read: {error}") from None
    return array


def _tiff(data: bytes, limits: Limits) -> np.ndarray:
    try:
        with tifffile.TiffFile(io.BytesIO(data)) as tiff:
            if not tiff.series:
                raise _refused("the TIFF file holds no image")
            series = tiff.series[0]
            shape = tuple(int(s) for s in series.shape)
            if series.dtype is None or series.dtype.kind not in "biuf":
                raise _refused(f"the TIFF file holds {series.dtype} values; send grayscale")
            # Colour samples (a last axis of 3 or 4 marked as samples) are not one value each.
            if series.axes and series.axes[-1] == "S":
                raise _refused(
                    f"the TIFF file holds colour (shape {list(shape)}, axes {series.axes}); send "
                    "one channel per file"
                )
            squeezed = tuple(s for s in shape if s != 1) if len(shape) > 3 else shape
            _check_declared(squeezed, limits, "TIFF file")
            array = series.asarray()
    except RequestInvalid:
        raise
    except Exception as error:  # tifffile raises many types on corrupt files
        raise _refused(f"the TIFF file cannot be read: {type(error).__name__}: {error}") from None
    return np.asarray(array).reshape(squeezed)


def _png(data: bytes, limits: Limits) -> np.ndarray:
    # IHDR is the first chunk: width and height are the 4-byte integers at offsets 16 and 20.
    if len(data) < 33 or data[12:16] != b"IHDR":
        raise _refused("the PNG file is corrupt: no IHDR chunk")
    width, height = struct.unpack(">II", data[16:24])
    _check_declared((height, width), limits, "PNG file")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error", Image.DecompressionBombWarning)
            with Image.open(io.BytesIO(data), formats=["PNG"]) as image:
                if image.mode not in _PNG_MODES:
                    raise _refused(
                        f"the PNG file is {image.mode} (colour or palette); send one grayscale "
                        "channel (8 or 16-bit)"
                    )
                image.load()
                array = np.asarray(image)
    except RequestInvalid:
        raise
    except Exception as error:  # Pillow raises many types on corrupt files
        raise _refused(f"the PNG file cannot be read: {type(error).__name__}: {error}") from None
    return array
