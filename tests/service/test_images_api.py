"""Images, masks and volumes over HTTP: JSON values and uploaded .npy, TIFF and PNG files give
the same diagrams (checked against gudhi), limits and decompression bombs are refused before
allocating, and every bad input is a 422 naming its field, never a 500.

Requests go through ``call`` (tests/support/api.py), so no answer may be a 500.
"""

import io
import json
import math
import struct
import tracemalloc
import zlib
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import tifffile
from flask.testing import FlaskClient
from PIL import Image
from scipy.ndimage import label
from werkzeug.test import TestResponse

from service.settings import Settings
from tests.support.api import (
    JOBS,
    WAIT,
    app_with,
    call,
    fresh_queue,
    pairs_array,
    post,
    problem_of,
    refused,
    said,
    stored_jobs,
)
from tests.support.bodies import rips_job
from tests.support.references import gudhi_diagrams
from tests.support.synthetic import ring_mask, smooth_field
from workers.spec.arrays import to_npy_bytes as npy


def upload(
    client: FlaskClient, body: dict[str, Any], data: bytes, name: str = "array", **kwargs: Any
) -> TestResponse:
    """POST a multipart request: the JSON ``request`` part and the ``data`` file part."""
    return call(
        client,
        "POST",
        JOBS,
        data={"request": json.dumps(body), "data": (io.BytesIO(data), name)},
        content_type="multipart/form-data",
        **kwargs,
    )


def tiff(array: np.ndarray, **options: Any) -> bytes:
    buffer = io.BytesIO()
    tifffile.imwrite(buffer, array, **options)
    return buffer.getvalue()


def png(array: np.ndarray) -> bytes:
    buffer = io.BytesIO()
    Image.fromarray(array).save(buffer, format="PNG")
    return buffer.getvalue()


def image_body(kind: str = "image", **filtration: Any) -> dict[str, Any]:
    return {
        "input": {"type": kind},
        "filtration": filtration or {"type": "cubical", "direction": "sublevel"},
    }


def with_values(body: dict[str, Any], array: np.ndarray) -> dict[str, Any]:
    return {**body, "input": {**body["input"], "values": array.tolist()}}


def result_of(response: TestResponse) -> dict[str, Any]:
    assert response.status_code == 200, response.get_data(as_text=True)
    result: dict[str, Any] = response.get_json()
    return result


def diagrams_of(result: dict[str, Any]) -> dict[int, np.ndarray]:
    return {d["dim"]: pairs_array(d["pairs"]) for d in result["diagrams"]}


# --- the same pixels by every way in ---------------------------------------------------------


def test_json_image_diagrams_equal_gudhi(served_client: FlaskClient) -> None:
    # Reference library: gudhi.CubicalComplex(top_dimensional_cells=...), float64.
    image = smooth_field((24, 31), 2.0, seed=1)
    result = result_of(post(served_client, JOBS, with_values(image_body(), image), headers=WAIT))
    assert result["value_convention"] == "pixel_value"
    assert result["units"] is None  # intensities have no unit of length
    found = diagrams_of(result)
    expected = gudhi_diagrams(image)
    for dim in (0, 1):
        np.testing.assert_allclose(found[dim], expected[dim], rtol=0, atol=1e-12)


def test_volume_superlevel_equals_gudhi_on_negated_values(served_client: FlaskClient) -> None:
    volume = smooth_field((9, 10, 11), 1.5, seed=2)
    body = with_values(image_body(type="cubical", direction="superlevel"), volume)
    result = result_of(post(served_client, JOBS, body, headers=WAIT))
    assert result["value_convention"] == "negated_pixel_value"
    found = diagrams_of(result)
    expected = gudhi_diagrams(-volume)
    assert sorted(found) == [0, 1, 2]
    for dim in range(3):
        np.testing.assert_allclose(found[dim], expected[dim], rtol=0, atol=1e-12)


@pytest.mark.parametrize(
    ("encode", "dtype"),
    [
        (npy, np.float64),
        (npy, np.int16),
        (npy, np.bool_),
        (tiff, np.uint8),
        (tiff, np.uint16),
        (tiff, np.float32),
        (png, np.uint8),
        (png, np.uint16),
    ],
)
def test_uploads_give_the_same_result_as_json_values(
    served_client: FlaskClient, encode: Any, dtype: Any
) -> None:
    image = smooth_field((20, 26), 2.0, seed=3)
    if dtype == np.bool_:
        pixels = image > 0
    elif np.issubdtype(dtype, np.integer):
        info = np.iinfo(dtype)
        scaled = (image - image.min()) / (image.max() - image.min())
        pixels = (info.min + scaled * (float(info.max) - info.min)).astype(dtype)
    else:
        pixels = image.astype(dtype)
    body = image_body(type="cubical", direction="superlevel")
    sent = result_of(upload(served_client, body, encode(pixels), headers=WAIT))
    as_json = result_of(
        post(served_client, JOBS, with_values(body, pixels.astype(np.float64)), headers=WAIT)
    )
    assert sent["diagrams"] == as_json["diagrams"]
    # Provenance hashes the float64 pixels and the request without its array: equal too.
    for key in ("input_sha256", "request_sha256"):
        assert sent["provenance"][key] == as_json["provenance"][key]
    expected = gudhi_diagrams(-pixels.astype(np.float64))
    for dim in (0, 1):
        np.testing.assert_allclose(diagrams_of(sent)[dim], expected[dim], atol=1e-9)


def test_multipage_tiff_is_a_volume(served_client: FlaskClient) -> None:
    volume = (smooth_field((6, 12, 13), 1.5, seed=4) * 1000 + 30000).astype(np.uint16)
    result = result_of(upload(served_client, image_body(), tiff(volume), headers=WAIT))
    found = diagrams_of(result)
    expected = gudhi_diagrams(volume.astype(np.float64))
    assert sorted(found) == [0, 1, 2]
    for dim in range(3):
        np.testing.assert_array_equal(found[dim], expected[dim])


def test_mask_distance_result_is_in_physical_units(served_client: FlaskClient) -> None:
    # Geometry (common practice): the ring's loop is born at minus its half-width and dies at
    # its inner radius, within one pixel diagonal, in the units of spacing.
    spacing = [0.5, 0.5]
    mask = ring_mask((100, 100), (25.0, 25.0), 10.0, 16.0, (0.5, 0.5)).astype(np.uint8) * 255
    body = {
        "input": {"type": "mask", "spacing": spacing, "units": "um"},
        "filtration": {"type": "distance"},
    }
    result = result_of(upload(served_client, body, png(mask), headers=WAIT))
    assert result["value_convention"] == "signed_distance"
    assert result["units"] == "um"
    loops = diagrams_of(result)[1]
    long = loops[loops[:, 1] - loops[:, 0] > 2]
    assert len(long) == 1
    assert abs(long[0, 0] + 3.0) <= math.hypot(*spacing)
    assert abs(long[0, 1] - 10.0) <= math.hypot(*spacing)


def test_height_with_directions_answers_per_direction_with_their_vectors(
    served_client: FlaskClient,
) -> None:
    mask = ring_mask((30, 30), (14.5, 14.5), 6.0, 11.0)
    betti = {
        "type": "betti_curve",
        "dim": 0,
        "t_range": [-5.0, 45.0],
        "samples": 11,
        "infinite": "cap",
        "cap": 1000.0,
    }
    body = with_values(
        {
            "input": {"type": "mask"},
            "filtration": {"type": "height", "directions": [[0, 2], [1, 0], [-1, -1]]},
            "features": [betti],
        },
        mask.astype(np.uint8),
    )
    result = result_of(post(served_client, JOBS, body, headers=WAIT))
    assert result["diagrams"] == []
    per_direction = result["per_direction"]
    assert [entry["direction"] for entry in per_direction] == [
        [0.0, 1.0],
        [1.0, 0.0],
        [-1 / math.sqrt(2), -1 / math.sqrt(2)],
    ]
    for entry in per_direction:
        # The ring: one piece and one loop for good (geometry, common practice).
        found = {d["dim"]: pairs_array(d["pairs"]) for d in entry["diagrams"]}
        assert [int(np.isinf(found[k][:, 1]).sum()) for k in (0, 1)] == [1, 1]
    assert [v["direction"] for v in result["vectors"]] == [0, 1, 2]
    assert [(e["start"], e["stop"]) for e in result["layout"]] == [(0, 11), (11, 22), (22, 33)]
    assert result["vector_length"] == 33
    # beta_0(t) is the number of corner-connected pieces of the pixels at height <= t
    # (reference: scipy.ndimage.label with a 3 x 3 structure).
    rows, cols = np.indices(mask.shape)
    grid = np.linspace(-5.0, 45.0, 11)
    for vector, entry in zip(result["vectors"], per_direction, strict=True):
        unit = entry["direction"]
        height = rows * unit[0] + cols * unit[1]
        expected = [label(mask & (height <= t), structure=np.ones((3, 3)))[1] for t in grid]
        assert vector["values"] == expected


def test_radial_center_outside_the_array_is_allowed(served_client: FlaskClient) -> None:
    mask = ring_mask((20, 20), (9.5, 9.5), 4.0, 8.0)
    body = with_values(
        {"input": {"type": "mask"}, "filtration": {"type": "radial", "center": [-50.0, 100.0]}},
        mask.astype(np.uint8),
    )
    result = result_of(post(served_client, JOBS, body, headers=WAIT))
    assert result["value_convention"] == "radial_distance"
    found = diagrams_of(result)
    births = found[0][:, 0]
    assert births.min() >= math.hypot(50 + 0, 100 - 19) - 1e-9  # no pixel is nearer


def test_capabilities_show_the_image_limits_and_formats(served_client: FlaskClient) -> None:
    capabilities = call(served_client, "GET", "/v1/capabilities").get_json()
    assert {"image", "mask"} <= set(capabilities["input_types"])
    takes = {entry["type"]: entry["inputs"] for entry in capabilities["filtrations"]}
    assert "image" in takes["cubical"]
    assert all("mask" in takes[name] for name in ("distance", "height", "radial"))
    assert capabilities["upload_formats"] == ["npy", "tiff", "png", "graphml"]
    limits = capabilities["limits"]
    assert limits["max_image_pixels"] == 4096 * 4096
    assert limits["max_volume_voxels"] == 512**3


# --- limits and decompression bombs ----------------------------------------------------------


def _png_chunk(kind: bytes, payload: bytes) -> bytes:
    return (
        struct.pack(">I", len(payload))
        + kind
        + payload
        + struct.pack(">I", zlib.crc32(kind + payload))
    )


def png_bomb(width: int, height: int) -> bytes:
    """A valid 1-bit PNG of ``width`` x ``height`` black pixels, compressed to a few KB
    (PNG specification, ISO/IEC 15948: IHDR, IDAT with filter byte 0 per row, IEND)."""
    header = struct.pack(">IIBBBBB", width, height, 1, 0, 0, 0, 0)
    compressor = zlib.compressobj(9)
    row = b"\x00" * (1 + (width + 7) // 8)
    data = b"".join(compressor.compress(row) for _ in range(height)) + compressor.flush()
    return (
        b"\x89PNG\r\n\x1a\n"
        + _png_chunk(b"IHDR", header)
        + _png_chunk(b"IDAT", data)
        + _png_chunk(b"IEND", b"")
    )


def tiff_with_tags(data: bytes, values: dict[int, int]) -> bytes:
    """A little-endian TIFF with the values of some tags of its first IFD rewritten (TIFF 6.0:
    IFD entries are tag, type, count, value; SHORT values fill the first 2 bytes)."""
    patched = bytearray(data)
    (offset,) = struct.unpack("<I", patched[4:8])
    (count,) = struct.unpack("<H", patched[offset : offset + 2])
    for entry in range(count):
        at = offset + 2 + 12 * entry
        tag, kind = struct.unpack("<HH", patched[at : at + 4])
        if tag in values:
            value = values[tag]
            patched[at + 8 : at + 12] = (
                struct.pack("<HH", value, 0) if kind == 3 else struct.pack("<I", value)
            )
    return bytes(patched)


def tiff_claiming(width: int, height: int) -> bytes:
    """A small TIFF whose ImageWidth (256) and ImageLength (257) claim a huge size."""
    return tiff_with_tags(tiff(np.zeros((8, 8), dtype=np.uint8)), {256: width, 257: height})


def npy_claiming(shape: tuple[int, ...]) -> bytes:
    header = npy(np.zeros((2, 2), dtype=np.uint8))
    text = header[10:].split(b"\n")[0]
    claimed = text.replace(b"(2, 2)", str(shape).encode()).ljust(len(text))
    return header[:10] + claimed + b"\n" + b"\x00" * 16


@pytest.mark.parametrize(
    ("bomb", "declared"),
    [
        (png_bomb(30_000, 30_000), "900000000"),
        (tiff_claiming(60_000, 60_000), "3600000000"),
        (npy_claiming((60_000, 60_000)), "3600000000"),
    ],
    ids=["png", "tiff", "npy"],
)
def test_files_declaring_a_huge_image_are_refused_before_allocating(
    client: FlaskClient, bomb: bytes, declared: str
) -> None:
    assert len(bomb) < 200_000
    tracemalloc.start()
    try:
        response = upload(client, image_body(), bomb)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    problem = refused(response, ["/data"], "above the limit of 16777216")
    assert declared in said(problem)  # the declared size, said
    assert peak < 50_000_000  # far below the 0.9 to 3.6 GB the declared image would take
    assert stored_jobs(client) == 0


def test_limits_are_configurable(redis_url: str) -> None:
    small = app_with(
        redis_url=redis_url, queue=fresh_queue(), max_image_pixels=100, max_volume_voxels=64
    ).test_client()
    refused(
        post(small, JOBS, with_values(image_body(), np.zeros((10, 11)))),
        ["/input/values"],
        "110 values, above the limit of 100 pixels",
    )
    refused(
        upload(small, image_body(), npy(np.zeros((4, 4, 5)))),
        ["/data"],
        "above the limit of 64 voxels",
    )
    assert post(small, JOBS, with_values(image_body(), np.zeros((10, 10)))).status_code == 202


def test_upload_over_the_upload_size_limit_is_413(redis_url: str) -> None:
    small = app_with(redis_url=redis_url, queue=fresh_queue(), max_upload_bytes=4096)
    problem = problem_of(upload(small.test_client(), image_body(), npy(np.zeros((40, 40)))), 413)
    assert "4096" in problem["detail"]


# --- bad input: each a 422 naming its field --------------------------------------------------


BAD_JSON: list[tuple[dict[str, Any], list[str], str]] = [
    (
        {
            "input": {"type": "mask", "values": [[0, 1], [1, 1]], "spacing": [1e-31, 1]},
            "filtration": {"type": "distance"},
        },
        ["/input/spacing/0"],
        "greater than or equal to 1e-30",
    ),
    (
        {
            "input": {"type": "mask", "values": [[0, 1], [1, 1]]},
            "filtration": {"type": "radial", "center": [1e91, 0]},
        },
        ["/filtration/center/0"],
        "less than or equal to 1e+90",
    ),
    (
        {
            "input": {"type": "mask", "values": [[0, 1], [1, 1]], "units": "um"},
            "filtration": {"type": "distance"},
        },
        ["/input/units"],
        "give spacing too",
    ),
    (
        {"input": {"type": "image", "values": [[[[0, 1]]]]}, "filtration": {"type": "cubical"}},
        ["/input/values/0/0/0"],
        "valid number",  # a fourth level of nesting where a voxel value belongs
    ),
    (
        {
            "input": {"type": "image", "values": [[0, 1], [2, "x"]]},
            "filtration": {"type": "cubical"},
        },
        ["/input/values/1/1"],
        "valid number",
    ),
    (
        {
            "input": {"type": "image", "values": [[0, 1], [2, math.nan]]},
            "filtration": {"type": "cubical"},
        },
        ["/input/values/1/1"],
        "finite",
    ),
    (
        {"input": {"type": "image", "values": [[0, 1], [2]]}, "filtration": {"type": "cubical"}},
        ["/input/values/1"],
        "same number",
    ),
    (
        {"input": {"type": "image", "values": [[5]]}, "filtration": {"type": "cubical"}},
        ["/input/values"],
        "at least 2",
    ),
    (
        {"input": {"type": "image", "values": []}, "filtration": {"type": "cubical"}},
        ["/input/values"],
        "at least 1",
    ),
    (
        {"input": {"type": "image"}, "filtration": {"type": "cubical"}},
        ["/input/values"],
        "multipart",
    ),
    (
        {
            "input": {"type": "mask", "values": [[0, 1], [0.5, 1]]},
            "filtration": {"type": "distance"},
        },
        ["/input/values/1/0"],
        "positive integers",
    ),
    (
        {
            "input": {"type": "mask", "values": [[0, 1], [-1, 1]]},
            "filtration": {"type": "distance"},
        },
        ["/input/values/1/0"],
        "0 for background",
    ),
    (
        {
            "input": {"type": "mask", "values": [[0, 1], [1, 1]]},
            "filtration": {"type": "height", "direction": [0, 0]},
        },
        ["/filtration/direction"],
        "length 0",
    ),
    (
        {
            "input": {"type": "mask", "values": [[0, 1], [1, 1]]},
            "filtration": {"type": "height", "directions": [[1, 0], [1, 0, 0]]},
        },
        ["/filtration/directions/1"],
        "3 numbers for a 2d array",
    ),
    (
        {"input": {"type": "mask", "values": [[0, 1], [1, 1]]}, "filtration": {"type": "height"}},
        ["/filtration/direction"],
        "exactly one",
    ),
    (
        {
            "input": {"type": "mask", "values": [[0, 1], [1, 1]]},
            "filtration": {"type": "radial", "center": [1, 2, 3]},
        },
        ["/filtration/center"],
        "3 coordinates for a 2d array",
    ),
    (
        {"input": {"type": "mask", "values": [[1, 1], [1, 1]]}, "filtration": {"type": "distance"}},
        ["/filtration/type"],
        "no background",
    ),
    (
        {
            "input": {"type": "image", "values": [[0, 1], [1, 1]], "spacing": [1, 2, 3]},
            "filtration": {"type": "cubical"},
        },
        ["/input/spacing"],
        "one per axis",
    ),
    (
        {
            "input": {"type": "image", "values": [[0, 1], [1, 1]], "spacing": [1, 0]},
            "filtration": {"type": "cubical"},
        },
        ["/input/spacing/1"],
        "greater than or equal to 1e-30",
    ),
    (
        {
            "input": {"type": "image", "values": [[0, 1], [1, 1]]},
            "filtration": {"type": "cubical", "max_dim": 2},
        },
        ["/filtration/max_dim"],
        "above 1",
    ),
    (
        {
            "input": {"type": "image", "values": [[0, 1], [1, 1]]},
            "filtration": {"type": "distance"},
        },
        ["/filtration/type"],
        'takes the "cubical" filtration',
    ),
    (
        {"input": {"type": "mask", "values": [[0, 1], [1, 1]]}, "filtration": {"type": "cubical"}},
        ["/filtration/type"],
        "distance",
    ),
    (
        {
            "input": {"type": "points", "points": [[0, 1], [1, 1]]},
            "filtration": {"type": "cubical"},
        },
        ["/filtration/type"],
        '"rips"',
    ),
    (
        {"input": {"type": "image", "values": [[0, 1], [1, 1]]}},
        ["/filtration"],
        "needs a filtration",
    ),
    (
        {
            "input": {"type": "image", "values": [[0, 1], [1, 1]]},
            "filtration": {"type": "cubical"},
            "features": [{"type": "betti_curve", "dim": 2, "t_range": [0, 1], "samples": 3}],
        },
        ["/features/0/dim"],
        "not among the dimensions",
    ),
]


@pytest.mark.parametrize(("body", "pointers", "hint"), BAD_JSON)
def test_bad_json_image_input_is_422_naming_the_field(
    client: FlaskClient, body: dict[str, Any], pointers: list[str], hint: str
) -> None:
    refused(post(client, JOBS, body), pointers, hint)
    assert stored_jobs(client) == 0


def test_nan_written_as_a_raw_token_is_refused(client: FlaskClient) -> None:
    raw = '{"input": {"type": "image", "values": [[0, NaN]]}, "filtration": {"type": "cubical"}}'
    response = call(client, "POST", JOBS, data=raw, content_type="application/json")
    refused(response, ["/input/values/0/1"], "finite")


class _Exploding:
    """Unpickling this object would create the file named in ``__reduce__``."""

    def __init__(self, marker: Path) -> None:
        self.marker = marker

    def __reduce__(self) -> tuple[Any, tuple[str]]:
        return (Path.touch, (str(self.marker),))  # type: ignore[return-value]


def _object_npy(marker: Path) -> bytes:
    array = np.empty((2, 2), dtype=object)
    array[:] = [[_Exploding(marker)] * 2] * 2
    buffer = io.BytesIO()
    np.save(buffer, array, allow_pickle=True)  # the attacker's side
    return buffer.getvalue()


BAD_UPLOADS: list[tuple[str, Any, str]] = [
    ("nan", lambda: npy(np.array([[0.0, 1.0], [np.nan, 2.0]])), "finite"),
    ("inf", lambda: npy(np.array([[0.0, np.inf], [1.0, 2.0]], dtype=np.float32)), "finite"),
    ("one pixel", lambda: npy(np.zeros((1, 1))), "at least 2"),
    ("empty", lambda: npy(np.zeros((0, 5))), "at least 2"),
    ("4d", lambda: npy(np.zeros((2, 2, 2, 2))), "4-dimensional"),
    ("1d", lambda: npy(np.zeros(5)), "1-dimensional"),
    ("complex", lambda: npy(np.zeros((3, 3), dtype=np.complex128)), "numbers"),
    (
        "longdouble overflow",
        lambda: npy(np.array([[0, np.longdouble("1e4000")], [1, 2]], dtype=np.longdouble)),
        "pixel [0, 1] is inf;",
    ),
    ("text", lambda: npy(np.array([["a", "b"], ["c", "d"]])), "numbers"),
    ("corrupt tiff", lambda: tiff(np.zeros((8, 8), np.uint8))[:40], "tiff file cannot be read"),
    ("corrupt png", lambda: png(np.zeros((8, 8), np.uint8))[:45], "png file cannot be read"),
    ("truncated npy", lambda: npy(np.zeros((8, 8)))[:-5], "holds"),
    ("colour png", lambda: png(np.zeros((8, 8, 3), np.uint8)), "grayscale"),
    ("unknown", lambda: b"GIF89a" + b"\x00" * 40, "not a .npy, tiff or png"),
]


@pytest.mark.parametrize(("name", "make", "hint"), BAD_UPLOADS, ids=[b[0] for b in BAD_UPLOADS])
def test_bad_upload_is_422_at_data(client: FlaskClient, name: str, make: Any, hint: str) -> None:
    refused(upload(client, image_body(), make()), ["/data"], hint)
    assert stored_jobs(client) == 0


def test_mask_upload_with_non_binary_values_is_refused(client: FlaskClient) -> None:
    mask = np.array([[0.0, 1.0], [0.25, 1.0]])
    refused(upload(client, image_body("mask", type="distance"), npy(mask)), ["/data"], "0/1")


def test_object_npy_is_refused_and_never_unpickled(client: FlaskClient, tmp_path: Path) -> None:
    marker = tmp_path / "unpickled"
    data = _object_npy(marker)
    assert not marker.exists()
    refused(upload(client, image_body(), data), ["/data"], "never unpickles")
    assert not marker.exists()


MULTIPART_MISTAKES: list[tuple[str, Any, list[str], str]] = [
    (
        "no request part",
        {"data": (io.BytesIO(b"\x93NUMPY"), "a.npy")},
        ["/request"],
        "request",
    ),
    (
        "no data part",
        {"request": json.dumps(image_body())},
        ["/data"],
        "data",
    ),
    (
        "points with a file",
        {
            "request": json.dumps(
                {"input": {"type": "points", "points": [[0, 0]]}, "filtration": {"type": "rips"}}
            ),
            "data": (io.BytesIO(b"\x93NUMPY"), "a.npy"),
        },
        ["/input/type"],
        "takes no uploaded file",
    ),
    (
        "values and a file",
        {
            "request": json.dumps(with_values(image_body(), np.zeros((2, 2)))),
            "data": (io.BytesIO(npy(np.zeros((2, 2)))), "a.npy"),
        },
        ["/input/values"],
        "one way",
    ),
]


@pytest.mark.parametrize(
    ("name", "form", "pointers", "hint"), MULTIPART_MISTAKES, ids=[m[0] for m in MULTIPART_MISTAKES]
)
def test_multipart_mistakes_are_422(
    client: FlaskClient, name: str, form: dict[str, Any], pointers: list[str], hint: str
) -> None:
    response = call(client, "POST", JOBS, data=form, content_type="multipart/form-data")
    refused(response, pointers, hint)


def test_request_part_that_is_not_json_is_400(client: FlaskClient) -> None:
    form = {"request": "{nope", "data": (io.BytesIO(npy(np.zeros((2, 2)))), "a.npy")}
    response = call(client, "POST", JOBS, data=form, content_type="multipart/form-data")
    assert "request" in problem_of(response, 400)["detail"]


# --- found in review: bounds, crafted files, result size ---------------------------------------


def test_values_at_the_bound_compute_and_above_it_are_refused(served_client: FlaskClient) -> None:
    body = with_values(
        image_body(type="cubical", direction="superlevel"),
        np.array([[0.0, 1e100], [-1e100, 3.0]]),
    )
    found = diagrams_of(result_of(post(served_client, JOBS, body, headers=WAIT)))
    assert found[0][0, 0] == -1e100  # the brightest pixel is born first, on the negated axis
    refused(
        upload(served_client, image_body(), npy(np.array([[0.0, 1e150], [1.0, 2.0]]))),
        ["/data"],
        "magnitude at most 1e+100",
    )


def tiff_with_tiles(tile: int) -> bytes:
    """A 16 x 16 tiled TIFF whose TileWidth and TileLength (322, 323) claim ``tile``: each tile
    would be decoded whole at the declared size (TIFF 6.0, section 15)."""
    small = tiff(np.zeros((16, 16), np.uint8), tile=(16, 16), compression="zlib")
    return tiff_with_tags(small, {322: tile, 323: tile})


def test_tiff_declaring_huge_tiles_is_refused_before_decoding(client: FlaskClient) -> None:
    tracemalloc.start()
    try:
        response = upload(client, image_body(), tiff_with_tiles(32768))
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    refused(response, ["/data"], "strips or tiles of [32768, 32768]")
    assert peak < 50_000_000


CRAFTED_NPY = [
    b"\x93NUMPY\x01\x00" + (16).to_bytes(2, "little") + b"{'descr': '<f8'\n",
    b"\x93NUMPY\x01\x00"
    + (70).to_bytes(2, "little")
    + b"{'descr': ('<f8',), 'fortran_order': False, 'shape': (2, 2), }".ljust(69)
    + b"\n"
    + b"\x00" * 32,
    b"\x93NUMPY\x01\x00"
    + (70).to_bytes(2, "little")
    + b"{'descr': '<f8', 'fortran_order': False, 'shape': (True, 2), }".ljust(69)
    + b"\n"
    + b"\x00" * 16,
]


@pytest.mark.parametrize("data", CRAFTED_NPY, ids=["cut header", "tuple descr", "bool shape"])
def test_crafted_npy_headers_are_422(client: FlaskClient, data: bytes) -> None:
    refused(upload(client, image_body(), data), ["/data"], ".npy")


def _two_series() -> bytes:
    buffer = io.BytesIO()
    with tifffile.TiffWriter(buffer) as writer:
        writer.write(np.zeros((4, 4), np.uint8))
        writer.write(np.ones((5, 5), np.uint8))
    return buffer.getvalue()


TIFF_REFUSED = [
    (
        "planar rgb",
        lambda: tiff(np.zeros((3, 8, 8), np.uint8), photometric="rgb", planarconfig="separate"),
        "grayscale",
    ),
    (
        "palette",
        lambda: tiff(
            np.zeros((8, 8), np.uint8),
            photometric="palette",
            colormap=np.zeros((3, 256), np.uint16),
        ),
        "grayscale",
    ),
    (
        "min-is-white",
        lambda: tiff(np.zeros((8, 8), np.uint8), photometric="miniswhite"),
        "min-is-black",
    ),
    ("two series", _two_series, "2 images"),
]


@pytest.mark.parametrize(("name", "make", "hint"), TIFF_REFUSED, ids=[t[0] for t in TIFF_REFUSED])
def test_tiffs_whose_pixels_are_not_one_grayscale_image_are_refused(
    client: FlaskClient, name: str, make: Any, hint: str
) -> None:
    refused(upload(client, image_body(), make()), ["/data"], hint)


def test_lzw_tiff_and_4_bit_png_keep_their_values(served_client: FlaskClient) -> None:
    image = (smooth_field((16, 18), 1.5, seed=7) * 40 + 8).clip(0, 15).astype(np.uint8)
    lzw = tiff(image, compression="lzw")
    buffer = io.BytesIO()
    Image.fromarray(image).save(buffer, format="PNG", bits=4)  # 4-bit gray (Pillow's option)
    assert buffer.getvalue()[24] == 4  # IHDR bit depth
    expected = gudhi_diagrams(image.astype(np.float64))
    for data in (lzw, buffer.getvalue()):
        found = diagrams_of(result_of(upload(served_client, image_body(), data, headers=WAIT)))
        for dim in (0, 1):
            np.testing.assert_array_equal(found[dim], expected[dim])


def test_animated_png_is_refused(client: FlaskClient) -> None:
    frames = [Image.fromarray(np.full((8, 8), v, np.uint8)) for v in (0, 9)]
    buffer = io.BytesIO()
    frames[0].save(buffer, format="PNG", save_all=True, append_images=frames[1:])
    refused(upload(client, image_body(), buffer.getvalue()), ["/data"], "animated")


def test_server_max_dim_limit_holds_for_images(redis_url: str) -> None:
    small = app_with(redis_url=redis_url, queue=fresh_queue(), max_dim=1).test_client()
    volume = np.zeros((2, 2, 2))
    refused(
        post(small, JOBS, with_values(image_body(), volume)),
        ["/filtration/max_dim"],
        "default max_dim of a 3d array, 2, is above this server's limit of 1",
    )
    body = with_values(image_body(type="cubical", max_dim=1), volume)
    assert post(small, JOBS, body).status_code == 202


def test_lengths_without_spacing_are_in_pixels(served_client: FlaskClient) -> None:
    mask = ring_mask((20, 20), (9.5, 9.5), 4.0, 8.0).astype(np.uint8)
    body = with_values({"input": {"type": "mask"}, "filtration": {"type": "distance"}}, mask)
    assert result_of(post(served_client, JOBS, body, headers=WAIT))["units"] == "pixel"


def test_subnormal_direction_is_scaled_to_a_unit_vector(served_client: FlaskClient) -> None:
    mask = ring_mask((12, 12), (5.5, 5.5), 2.0, 5.0).astype(np.uint8)
    body = with_values(
        {
            "input": {"type": "mask"},
            "filtration": {"type": "height", "directions": [[5e-324, 5e-324]]},
        },
        mask,
    )
    unit = result_of(post(served_client, JOBS, body, headers=WAIT))["per_direction"][0]["direction"]
    assert unit == [1 / math.sqrt(2), 1 / math.sqrt(2)]


def test_result_over_the_pair_limit_fails_with_a_problem(
    served: tuple[FlaskClient, Settings],
) -> None:
    # The same queue and worker as the module, through an API that allows 50 pairs per result.
    _, settings = served
    strict = app_with(redis_url=settings.redis_url, queue=settings.queue, max_result_pairs=50)
    client = strict.test_client()
    noise = np.random.default_rng(8).random((30, 30))
    response = post(client, JOBS, with_values(image_body(), noise), headers=WAIT)
    assert response.status_code == 202  # not succeeded: failed with its problem
    status = response.get_json()
    assert status["status"] == "failed"
    problem = status["problem"]
    assert problem["status"] == 422
    assert "above the limit of 50 per result" in problem["detail"]
    assert [e["pointer"] for e in problem["errors"]] == ["/filtration"]
    # The cap holds for every job: 100 random points have more than 50 pairs in H0 and H1.
    points = rips_job(np.random.default_rng(9).random((100, 2)).tolist(), max_dim=1)
    failed = post(client, JOBS, points, headers=WAIT).get_json()
    assert failed["status"] == "failed"
    assert "above the limit of 50 per result" in failed["problem"]["detail"]


def test_media_type_answer_names_both_ways_in(client: FlaskClient) -> None:
    response = call(client, "POST", JOBS, data=b"x", content_type="text/plain")
    assert "multipart/form-data" in problem_of(response, 415)["detail"]


def test_oversized_request_text_part_is_413_saying_so(client: FlaskClient) -> None:
    # The multipart body is written out here (RFC 7578): werkzeug's test client would spool a
    # large form to a temporary file of its own.
    text = json.dumps(image_body()) + " " * 1_100_000
    body = (
        b'--XyZ\r\nContent-Disposition: form-data; name="request"\r\n\r\n'
        + text.encode()
        + b'\r\n--XyZ\r\nContent-Disposition: form-data; name="data"; filename="a.npy"\r\n\r\n'
        + npy(np.zeros((2, 2)))
        + b"\r\n--XyZ--\r\n"
    )
    response = call(
        client, "POST", JOBS, data=body, content_type="multipart/form-data; boundary=XyZ"
    )
    assert "text part is larger than 1048576 bytes" in problem_of(response, 413)["detail"]
