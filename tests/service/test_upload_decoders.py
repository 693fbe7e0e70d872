"""The upload decoders read from the file werkzeug spooled the part to, and the scanline count
that refuses truncated PNGs lets every valid one through: each bit depth, and interlaced
(Adam7) images, decoded as Pillow (the reference reader) decodes them.
"""

import io
import struct
import tempfile
import zlib
from typing import IO

import numpy as np
import pytest
import tifffile
from PIL import Image

from service.extension import limits_of
from service.settings import Settings
from service.uploads import decode_array

LIMITS = limits_of(Settings())
ADAM7 = (
    (0, 0, 8, 8),
    (4, 0, 8, 8),
    (0, 4, 4, 8),
    (2, 0, 4, 4),
    (0, 2, 2, 4),
    (1, 0, 2, 2),
    (0, 1, 1, 2),
)
"""Adam7's passes, (first column, first row, column step, row step): PNG specification
(ISO/IEC 15948), section 8.2."""


def _chunk(kind: bytes, body: bytes) -> bytes:
    return struct.pack(">I", len(body)) + kind + body + struct.pack(">I", zlib.crc32(kind + body))


def interlaced_png(image: np.ndarray) -> bytes:
    """``image`` (uint8, 2D) as an Adam7-interlaced 8-bit gray PNG, written by hand from the
    specification (Pillow writes no interlaced PNGs): each pass's rows, filter byte 0 first."""
    height, width = image.shape
    scanlines = b""
    for column, row, column_step, row_step in ADAM7:
        part = image[row::row_step, column::column_step]
        if part.size:
            scanlines += b"".join(b"\x00" + line.tobytes() for line in part)
    header = struct.pack(">IIBBBBB", width, height, 8, 0, 0, 0, 1)
    return (
        b"\x89PNG\r\n\x1a\n"
        + _chunk(b"IHDR", header)
        + _chunk(b"IDAT", zlib.compress(scanlines))
        + _chunk(b"IEND", b"")
    )


def spooled(data: bytes) -> IO[bytes]:
    """The file object werkzeug hands over for an uploaded part past 500 kB."""
    stream = tempfile.TemporaryFile("w+b")
    stream.write(data)
    stream.seek(0)
    return stream


@pytest.mark.parametrize("shape", [(1, 2), (3, 5), (8, 8), (13, 9), (64, 33)])
def test_interlaced_pngs_decode_as_pillow_decodes_them(shape: tuple[int, int]) -> None:
    image = np.random.default_rng(sum(shape)).integers(0, 256, shape, dtype=np.uint8)
    data = interlaced_png(image)
    with Image.open(io.BytesIO(data)) as reference:
        assert reference.info.get("interlace") == 1
        expected = np.asarray(reference)
    assert np.array_equal(expected, image)  # the hand-written file is what it should be
    assert np.array_equal(decode_array(data, LIMITS), image)


@pytest.mark.parametrize("mode", ["1", "L", "I;16"])
def test_pngs_of_every_gray_depth_decode_as_pillow_decodes_them(mode: str) -> None:
    rng = np.random.default_rng(4)
    if mode == "1":
        image = Image.fromarray(rng.integers(0, 2, (7, 11)).astype(bool))
    elif mode == "L":
        image = Image.fromarray(rng.integers(0, 256, (7, 11), dtype=np.uint8))
    else:
        image = Image.fromarray(rng.integers(0, 65536, (7, 11), dtype=np.uint16))
    buffer = io.BytesIO()
    image.save(buffer, format="PNG")
    with Image.open(io.BytesIO(buffer.getvalue())) as reference:
        expected = np.asarray(reference)
    with spooled(buffer.getvalue()) as stream:
        assert np.array_equal(decode_array(stream, LIMITS), expected)


def test_npy_and_tiff_decode_from_a_spooled_file() -> None:
    array = np.random.default_rng(2).normal(size=(6, 7))
    buffer = io.BytesIO()
    np.save(buffer, array)
    with spooled(buffer.getvalue()) as stream:
        assert np.array_equal(decode_array(stream, LIMITS), array)
    stack = np.random.default_rng(3).integers(0, 4000, (3, 5, 6), dtype=np.uint16)
    buffer = io.BytesIO()
    tifffile.imwrite(buffer, stack, compression="zlib", photometric="minisblack")
    with spooled(buffer.getvalue()) as stream:
        assert np.array_equal(decode_array(stream, LIMITS), stack)
