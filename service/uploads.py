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
import re
import struct
import warnings
from typing import Any

import numpy as np
import tifffile
from flask import Request
from PIL import Image

from service.errors import BodyNotJson, RequestInvalid
from workers.spec import FieldError, Limits
from workers.spec.kinds.pixels import UPLOAD_POINTER, shape_error

__all__ = ["UPLOAD_FORMATS", "REQUEST_PART", "DATA_PART", "decode_array", "multipart_parts"]

REQUEST_PART = "request"
DATA_PART = "data"

UPLOAD_FORMATS = ("npy", "tiff", "png", "graphml")
"""Formats accepted as the data part: NumPy .npy (NEP 1, never pickled), TIFF (2D, or a
multi-page stack as 3D; one min-is-black channel of 8/16/32-bit integers or floats; any
compression imagecodecs decodes, LZW and deflate included) and PNG (grayscale 1 to 16-bit)
for image and mask inputs; GraphML for graph inputs (``service.graphml``)."""

_NPY_MAGIC = b"\x93NUMPY"
_PNG_MAGIC = b"\x89PNG\r\n\x1a\n"
_TIFF_MAGICS = (b"II*\x00", b"MM\x00*", b"II+\x00", b"MM\x00+")  # classic and BigTIFF

_PNG_MODES = {"1", "L", "I", "I;16", "I;16B", "I;16L", "F"}
"""Single-channel Pillow modes: bilevel, 8-bit, 32-bit integer, 16-bit and float."""


def _refused(message: str) -> RequestInvalid:
    return RequestInvalid([FieldError(pointer=UPLOAD_POINTER, message=message)])


MAX_REQUEST_PART_BYTES = 1024 * 1024
"""Largest ``request`` part sent as a text field (a request without its array is small)."""


def multipart_parts(request: Request) -> tuple[Any, bytes]:
    """The parsed ``request`` part and the raw bytes of the ``data`` part."""
    request.max_form_memory_size = MAX_REQUEST_PART_BYTES
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
    error = shape_error(shape, limits, UPLOAD_POINTER, what)
    if error is not None:
        raise RequestInvalid([error])


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
    except Exception as error:  # numpy's header parser raises many types on crafted headers
        raise _refused(f"the .npy header cannot be read: {_said(error)}") from None
    if not all(type(size) is int and size >= 0 for size in shape):
        raise _refused(
            f"the .npy header declares shape {shape!r}; sizes must be non-negative integers"
        )
    if dtype.hasobject or dtype.fields is not None or dtype.kind not in "biuf":
        raise _refused(
            f"the .npy file holds {dtype} values; send numbers (bool, integer or floating "
            "point). Object arrays are refused: lacuna never unpickles"
        )
    _check_declared(tuple(shape), limits, "the .npy file")
    expected = math.prod(shape) * dtype.itemsize
    if len(data) - stream.tell() != expected:
        raise _refused(
            f"the .npy file declares {expected} bytes of data but holds {len(data) - stream.tell()}"
        )
    try:
        array: np.ndarray = np.load(io.BytesIO(data), allow_pickle=False)
    except Exception as error:  # a header numpy accepted above but cannot load
        raise _refused(f"the .npy file cannot be read: {_said(error)}") from None
    return array


def _tiff(data: bytes, limits: Limits) -> np.ndarray:
    try:
        with tifffile.TiffFile(io.BytesIO(data)) as tiff:
            if len(tiff.series) != 1:
                raise _refused(
                    f"the TIFF file holds {len(tiff.series)} images (series); send one image "
                    "or one stack per file"
                )
            series = tiff.series[0]
            shape = tuple(int(s) for s in series.shape)
            if series.dtype is None or series.dtype.kind not in "biuf":
                raise _refused(f"the TIFF file holds {series.dtype} values; send grayscale")
            page = series.keyframe
            if "S" in series.axes or page.photometric != tifffile.PHOTOMETRIC.MINISBLACK:
                try:
                    kind = tifffile.PHOTOMETRIC(page.photometric).name
                except ValueError:
                    kind = f"photometric {page.photometric}"
                raise _refused(
                    f"the TIFF file is {kind} with axes {series.axes} (shape {list(shape)}); "
                    "send one grayscale channel stored min-is-black"
                )
            squeezed = tuple(s for s in shape if s != 1) if len(shape) > 3 else shape
            _check_declared(squeezed, limits, "the TIFF file")
            # Each strip or tile is decoded whole before it is placed: a tiny image may
            # declare huge tiles (a decompression bomb), so they count against the limit too.
            chunk = math.prod(int(n) for n in page.chunks)
            if chunk > limits.max_image_pixels:
                raise _refused(
                    f"the TIFF file declares strips or tiles of {list(page.chunks)}, {chunk} "
                    f"values each, above the limit of {limits.max_image_pixels}"
                )
            array = series.asarray()
    except RequestInvalid:
        raise
    except Exception as error:  # tifffile and its codecs raise many types on corrupt files
        raise _refused(f"the TIFF file cannot be read: {_said(error)}") from None
    return np.asarray(array).reshape(squeezed)


def _png(data: bytes, limits: Limits) -> np.ndarray:
    # IHDR is the first chunk: width, height (4 bytes each), bit depth, colour type.
    if len(data) < 33 or data[12:16] != b"IHDR":
        raise _refused("the PNG file is corrupt: no IHDR chunk")
    width, height, bit_depth = struct.unpack(">IIB", data[16:25])
    _check_declared((height, width), limits, "the PNG file")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error", Image.DecompressionBombWarning)
            with Image.open(io.BytesIO(data), formats=["PNG"]) as image:
                if image.mode not in _PNG_MODES:
                    raise _refused(
                        f"the PNG file is {image.mode} (colour or palette); send one grayscale "
                        "channel (1 to 16-bit)"
                    )
                if getattr(image, "n_frames", 1) > 1:
                    raise _refused("the PNG file is animated; send one frame per file")
                image.load()
                array = np.asarray(image)
    except RequestInvalid:
        raise
    except Exception as error:  # Pillow raises many types on corrupt files
        raise _refused(f"the PNG file cannot be read: {_said(error)}") from None
    if image.mode == "L" and bit_depth in (2, 4):
        # Pillow widens 2 and 4-bit gray to 8 bits (x 85, x 17); give back the stored values.
        array = array // (255 // (2**bit_depth - 1))
    return array


def _said(error: Exception) -> str:
    """An exception as words for the client, without object reprs (addresses mean nothing)."""
    return f"{type(error).__name__}: " + re.sub(r"<[^<>]*>", "...", str(error))
