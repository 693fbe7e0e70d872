"""Arrays uploaded as files: the multipart convention and the decoders of .npy, TIFF and PNG.

One way in for every binary input: ``multipart/form-data`` with two parts, ``request`` (the
JSON body a JSON request would have, without the array) and ``data`` (the file). The format is
told from the file's first bytes, not from its name or part headers.

Every decoder reads from the file werkzeug spooled the part to (never one bytes copy of the
upload), reads the declared shape and type first and refuses what is over the limits before
allocating the array, so a small file that declares a huge one (a decompression bomb) costs
nothing. Truncated or corrupt data is refused, not read as zeros: a PNG's scanlines are
counted, a TIFF's strips must lie in the file. Nothing is ever unpickled.
"""

import io
import json
import math
import re
import struct
import warnings
import zlib
from typing import IO, Any

import numpy as np
import tifffile
from flask import Request
from PIL import Image

from service.errors import BodyNotJson, RequestInvalid
from workers.spec import FieldError, Limits
from workers.spec.kinds.pixels import UPLOAD_POINTER, shape_error

__all__ = [
    "UPLOAD_FORMATS",
    "REQUEST_PART",
    "DATA_PART",
    "decode_array",
    "multipart_parts",
    "stream_size",
]

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
"""Largest ``request`` part, sent as a text field or as a file (a request without its array
is small)."""


def multipart_parts(request: Request) -> tuple[Any, IO[bytes]]:
    """The parsed ``request`` part and the ``data`` part as a file object at its start.

    werkzeug's form parser spools file parts to a temporary file past 500 kB, so an upload
    is never one bytes object in memory; the decoders read from the file."""
    request.max_form_memory_size = MAX_REQUEST_PART_BYTES
    text: str | None = request.form.get(REQUEST_PART)
    if text is None and REQUEST_PART in request.files:
        raw = request.files[REQUEST_PART].stream.read(MAX_REQUEST_PART_BYTES + 1)
        if len(raw) > MAX_REQUEST_PART_BYTES:
            raise RequestInvalid(
                [
                    FieldError(
                        pointer="/" + REQUEST_PART,
                        message=f'the "{REQUEST_PART}" part is larger than '
                        f"{MAX_REQUEST_PART_BYTES} bytes; it holds the JSON request without "
                        "its array, which goes in the data part",
                    )
                ]
            )
        text = raw.decode("utf-8", errors="replace")
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
    stream: IO[bytes] = upload.stream
    stream.seek(0)
    return body, stream


def stream_size(stream: IO[bytes]) -> int:
    """Bytes from the stream's position to its end; the position is kept."""
    here = stream.tell()
    size = stream.seek(0, io.SEEK_END) - here
    stream.seek(here)
    return size


def decode_array(source: IO[bytes] | bytes, limits: Limits) -> np.ndarray:
    """The array in an uploaded .npy, TIFF or PNG file (a file object at its start, or bytes),
    checked against the size limits first.

    Raises RequestInvalid (pointing at ``/data``) for unknown, corrupt, truncated or oversized
    files.
    """
    stream: IO[bytes] = io.BytesIO(source) if isinstance(source, bytes) else source
    head = stream.read(8)
    stream.seek(0)
    if head.startswith(_NPY_MAGIC):
        return _npy(stream, limits)
    if head.startswith(_TIFF_MAGICS):
        return _tiff(stream, limits)
    if head.startswith(_PNG_MAGIC):
        return _png(stream, limits)
    raise _refused("the data part is not a .npy, TIFF or PNG file (told from its first bytes)")


def _check_declared(shape: tuple[int, ...], limits: Limits, what: str) -> None:
    """Refuse a declared shape over the limits before anything is allocated."""
    error = shape_error(shape, limits, UPLOAD_POINTER, what)
    if error is not None:
        raise RequestInvalid([error])


def _npy(stream: IO[bytes], limits: Limits) -> np.ndarray:
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
    held = stream_size(stream)
    if held != expected:
        raise _refused(f"the .npy file declares {expected} bytes of data but holds {held}")
    stream.seek(0)
    try:
        array: np.ndarray = np.load(stream, allow_pickle=False)
    except Exception as error:  # a header numpy accepted above but cannot load
        raise _refused(f"the .npy file cannot be read: {_said(error)}") from None
    return array


def _tiff(stream: IO[bytes], limits: Limits) -> np.ndarray:
    size = stream_size(stream)
    try:
        with tifffile.TiffFile(stream, name="upload.tif") as tiff:  # a temporary file has none
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
            _check_segments(series.pages, size)
            array = series.asarray()
    except RequestInvalid:
        raise
    except Exception as error:  # tifffile and its codecs raise many types on corrupt files
        raise _refused(f"the TIFF file cannot be read: {_said(error)}") from None
    return np.asarray(array).reshape(squeezed)


def _check_segments(pages: Any, size: int) -> None:
    """Refuse strips or tiles with no bytes or past the end of the file: tifffile reads a
    missing segment as zeros (sparse TIFF), which here would be pixels nobody sent."""
    for number, page in enumerate(pages):
        if page is None:
            raise _refused(f"the TIFF file's page {number} cannot be read")
        for offset, count in zip(page.dataoffsets, page.databytecounts, strict=True):
            if count == 0 or offset + count > size:
                raise _refused(
                    "the TIFF file cannot be read, it is truncated or corrupt: page "
                    f"{number} has a strip or tile of {count} bytes at offset {offset}, the "
                    f"file has {size} bytes"
                )


_PNG_CHANNELS = {0: 1, 2: 3, 3: 1, 4: 2, 6: 4}
"""Samples per pixel of each PNG colour type (PNG specification, section 11.2.2 IHDR)."""

_ADAM7 = (
    (0, 0, 8, 8),
    (4, 0, 8, 8),
    (0, 4, 4, 8),
    (2, 0, 4, 4),
    (0, 2, 2, 4),
    (1, 0, 2, 2),
    (0, 1, 1, 2),
)
"""Adam7 passes as (first column, first row, column step, row step) (PNG spec, 8.2)."""


def _scanline_bytes(width: int, height: int, bits_per_pixel: int, interlaced: bool) -> int:
    """Bytes of filtered scanlines the image data must decompress to (PNG spec, 7.2 and 8.2):
    one filter byte and ceil(width * bits / 8) bytes a row, for each pass if interlaced."""
    passes = _ADAM7 if interlaced else ((0, 0, 1, 1),)
    total = 0
    for column, row, column_step, row_step in passes:
        columns = -(-(width - column) // column_step) if width > column else 0
        rows = -(-(height - row) // row_step) if height > row else 0
        if columns and rows:
            total += rows * (1 + -(-(columns * bits_per_pixel) // 8))
    return total


class _CorruptPng(Exception):
    """The image data of a PNG file fails its CRC (PNG specification, section 5.3)."""


def _png_data_bytes(stream: IO[bytes], limit: int) -> int:
    """Bytes the IDAT chunks decompress to, counted as they stream past (at most ``limit``
    plus one: more is as wrong as less), each chunk's CRC checked on the way (Pillow does not
    check those of IDAT). Raises zlib.error or _CorruptPng on corrupt data."""
    stream.seek(8)
    inflater = zlib.decompressobj()
    total = 0
    while True:
        head = stream.read(8)
        if len(head) < 8:
            break
        length, kind = struct.unpack(">I4s", head)
        if kind == b"IEND":
            break
        if kind != b"IDAT":
            stream.seek(length + 4, io.SEEK_CUR)
            continue
        left, crc = length, zlib.crc32(kind)
        while left:
            piece = stream.read(min(left, 1 << 20))
            if not piece:
                break
            left -= len(piece)
            crc = zlib.crc32(piece, crc)
            while piece and total <= limit:
                total += len(inflater.decompress(piece, 1 << 20))
                piece = inflater.unconsumed_tail
        stored = stream.read(4)
        if left or len(stored) < 4:
            break  # the file ends inside the chunk: too few scanlines, said by the caller
        if struct.unpack(">I", stored)[0] != crc:
            raise _CorruptPng("an IDAT chunk fails its CRC")
    while total <= limit and not inflater.eof:
        out = inflater.decompress(b"", 1 << 20)
        if not out:
            break
        total += len(out)
    return total


def _png(stream: IO[bytes], limits: Limits) -> np.ndarray:
    # IHDR is the first chunk: width, height (4 bytes each), bit depth, colour type,
    # compression, filter and interlace method.
    header = stream.read(33)
    if len(header) < 33 or header[12:16] != b"IHDR":
        raise _refused("the PNG file is corrupt: no IHDR chunk")
    width, height, bit_depth, colour, _, _, interlace = struct.unpack(">IIBBBBB", header[16:29])
    _check_declared((height, width), limits, "the PNG file")
    expected = _scanline_bytes(
        width, height, bit_depth * _PNG_CHANNELS.get(colour, 4), interlace == 1
    )
    try:
        held = _png_data_bytes(stream, expected)
    except (zlib.error, _CorruptPng) as error:
        raise _refused(
            f"the PNG file cannot be read, its image data is corrupt: {_said(error)}"
        ) from None
    if held != expected:
        # Pillow takes a complete zlib stream that ends early and leaves the rows it lacks
        # at zero: the scanlines are counted here instead.
        raise _refused(
            "the PNG file cannot be read, it is truncated or corrupt: its image data holds "
            f"{held} bytes of scanlines where {width} x {height} pixels take {expected}"
        )
    stream.seek(0)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error", Image.DecompressionBombWarning)
            with Image.open(stream, formats=["PNG"]) as image:
                if image.mode not in _PNG_MODES:
                    raise _refused(
                        f"the PNG file is {image.mode} (colour or palette); send one grayscale "
                        "channel (1 to 16-bit)"
                    )
                if getattr(image, "n_frames", 1) > 1:
                    raise _refused("the PNG file is animated; send one frame per file")
                image.load()  # ImageFile.LOAD_TRUNCATED_IMAGES is off: truncation raises
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
