"""Bad input, one named case a row: every answer is a 4xx RFC 9457 problem that names the
culprit, never a 500, a hang or a job.

A case names its field in one of two ways: a JSON Pointer (RFC 6901) that must be among the
problem's ``errors`` pointers and, when ``present``, must resolve into what was sent (the
JSON body, the multipart parts, or the query string taken as an object), checked with
``tests.support.pointers.resolves``; or, for headers and path ids, a word the problem's
``detail`` must carry. The groups cite the rule each case holds the API to. The last group
talks to a real gunicorn, because those answers come from the HTTP server itself.
"""

import io
import json
import socket
import struct
import uuid
import zlib
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from typing import Any
from urllib.parse import urlsplit

import numpy as np
import pytest
import requests
import tifffile
from flask import Flask
from flask.testing import FlaskClient
from PIL import Image
from werkzeug.datastructures import FileStorage
from werkzeug.test import encode_multipart

from service.app import create_app
from service.settings import Settings
from tests.support.api import PROBLEM_JSON, fresh_queue, pointers_of, problem_of, stored_jobs
from tests.support.bodies import rips_job
from tests.support.http_server import gunicorn_api
from tests.support.pointers import resolves

JOB = "0b7e2c1e-5d3f-4a51-9a8e-3c2f6b1d7e90"  # well formed, never submitted
BRACED = "{" + JOB + "}"
IMAGE_REQUEST = {"input": {"type": "image"}, "filtration": {"type": "cubical"}}
GRAPH_REQUEST = {"input": {"type": "graph"}, "output": ["descriptors"]}
NPY = "application/x-npy"


@dataclass(frozen=True)
class Case:
    """One bad request and the field its problem must name."""

    id: str
    method: str
    path: str
    status: int
    names: str
    """A JSON Pointer ("" or starting with "/") into what was sent, or a word of the detail."""
    body: Any = None
    """Sent as JSON (json.dumps: NaN and Infinity as the raw tokens many clients write)."""
    raw: bytes | None = None
    content_type: str | None = None
    parts: dict[str, Any] | None = None
    """Multipart parts: "request" a JSON-ready value or text, "data" bytes."""
    query: dict[str, str] | None = None
    headers: dict[str, str] = field(default_factory=dict)
    present: bool = True
    """The pointer names a value that was sent (False: a required one that is missing)."""
    settings: dict[str, Any] = field(default_factory=dict)


def _png_chunk(kind: bytes, body: bytes) -> bytes:
    return struct.pack(">I", len(body)) + kind + body + struct.pack(">I", zlib.crc32(kind + body))


def png_rows(height: int, rows: int, width: int = 16) -> bytes:
    """An 8-bit gray PNG whose IHDR says ``height`` rows and whose complete zlib stream holds
    ``rows`` scanlines (PNG specification, ISO/IEC 15948: IHDR, IDAT, IEND; filter 0 a row)."""
    header = struct.pack(">IIBBBBB", width, height, 8, 0, 0, 0, 0)
    scanlines = b"".join(b"\x00" + bytes(range(7, 7 + width)) for _ in range(rows))
    return (
        b"\x89PNG\r\n\x1a\n"
        + _png_chunk(b"IHDR", header)
        + _png_chunk(b"IDAT", zlib.compress(scanlines))
        + _png_chunk(b"IEND", b"")
    )


IEND = _png_chunk(b"IEND", b"")


def png(array: np.ndarray) -> bytes:
    buffer = io.BytesIO()
    Image.fromarray(array).save(buffer, format="PNG")
    return buffer.getvalue()


def tiff_with_empty_strip(compression: str | None = None) -> bytes:
    """A 64 x 64 TIFF in 4 strips whose last StripByteCounts entry is 0 (TIFF 6.0: the
    StripByteCounts field gives each strip's bytes of the image; tifffile reads an empty
    strip as zeros)."""
    image = np.arange(64 * 64, dtype=np.uint16).reshape(64, 64) + 1
    buffer = io.BytesIO()
    tifffile.imwrite(buffer, image, compression=compression, rowsperstrip=16)
    buffer.seek(0)
    with tifffile.TiffFile(buffer, mode="r+") as tiff:
        page = tiff.pages[0]
        assert isinstance(page, tifffile.TiffPage)
        counts = page.tags["StripByteCounts"]
        counts.overwrite((*counts.value[:-1], 0))
    return buffer.getvalue()


def tiff_cut(compression: str | None) -> bytes:
    buffer = io.BytesIO()
    tifffile.imwrite(buffer, np.ones((64, 64), np.uint8), compression=compression)
    whole = buffer.getvalue()
    return whole[: len(whole) - 300]


def npy(array: np.ndarray) -> bytes:
    buffer = io.BytesIO()
    np.save(buffer, array)
    return buffer.getvalue()


GRAPHML = (
    '<?xml version="1.0" encoding="UTF-8"?><graphml xmlns="http://graphml.graphdrawing.org/xmlns">'
    '<key id="x" for="node" attr.name="x" attr.type="double"/>'
    '<key id="y" for="node" attr.name="y" attr.type="double"/>'
)


def graphml(body: str, head: str = GRAPHML) -> bytes:
    return (head + '<graph edgedefault="undirected">' + body + "</graph></graphml>").encode()


def node(name: str, x: float = 0, y: float = 0) -> str:
    return f'<node id="{name}"><data key="x">{x}</data><data key="y">{y}</data></node>'


def feature_job(feature: dict[str, Any]) -> dict[str, Any]:
    return rips_job(features=[feature])


BETTI = {"type": "betti_curve", "dim": 0, "t_range": [0, 2], "samples": 8}
IMAGE_FEATURE = {
    "type": "persistence_image",
    "dim": 1,
    "birth_range": [0, 1],
    "persistence_range": [0, 1],
    "resolution": [4, 4],
    "sigma": 0.1,
    "weight": {"type": "linear"},
}
PAIRS = [[0.0, 1.0], [0.5, 2.0]]

# RFC 9110 sections 15.5.1 (400), 15.5.21 (422), 15.5.16 (415); RFC 9457 section 3 (problem
# members, the errors extension); RFC 6901 (the pointers). JSON bodies of /v1/jobs.
JSON_BODIES = [
    Case("job body not json", "POST", "/v1/jobs", 400, "body", raw=b"{not json"),
    Case("job body too deep", "POST", "/v1/jobs", 400, "body", raw=b"[" * 100_000),
    Case("job body is a list", "POST", "/v1/jobs", 422, "", body=[]),
    Case("job without input", "POST", "/v1/jobs", 422, "/input", body={}, present=False),
    Case(
        "unknown input type",
        "POST",
        "/v1/jobs",
        422,
        "/input/type",
        body={"input": {"type": "banana"}},
    ),
    Case(
        "points not a list",
        "POST",
        "/v1/jobs",
        422,
        "/input/points",
        body={"input": {"type": "points", "points": "abc"}, "filtration": {"type": "rips"}},
    ),
    Case(
        "point is NaN",
        "POST",
        "/v1/jobs",
        422,
        "/input/points/1/0",
        body=rips_job([[0, 0], [float("nan"), 1], [1, 1]]),
    ),
    Case(
        "point is Infinity",
        "POST",
        "/v1/jobs",
        422,
        "/input/points/2/1",
        body=rips_job([[0, 0], [1, 1], [1, float("inf")]]),
    ),
    Case(
        "ragged points",
        "POST",
        "/v1/jobs",
        422,
        "/input/points/1",
        body=rips_job([[0, 0], [1, 1, 1], [2, 2]]),
    ),
    Case("unknown field", "POST", "/v1/jobs", 422, "/bogus", body={**rips_job(), "bogus": 1}),
    Case(
        "unknown filtration type",
        "POST",
        "/v1/jobs",
        422,
        "/filtration/type",
        body={"input": {"type": "points", "points": [[0, 0]]}, "filtration": {"type": "nope"}},
    ),
    Case(
        "negative max_edge",
        "POST",
        "/v1/jobs",
        422,
        "/filtration/max_edge",
        body=rips_job(max_edge=-1),
    ),
    Case(
        "unknown output",
        "POST",
        "/v1/jobs",
        422,
        "/output/0",
        body={**rips_job(), "output": ["everything"]},
    ),
    Case(
        "graph edge out of range",
        "POST",
        "/v1/jobs",
        422,
        "/input/edges/0/1",
        body={
            "input": {"type": "graph", "nodes": [[0, 0], [1, 0]], "edges": [[0, 7]]},
            "output": ["descriptors"],
        },
    ),
    Case(
        "image values not numbers",
        "POST",
        "/v1/jobs",
        422,
        "/input/values/0/1",
        body={
            "input": {"type": "image", "values": [[0, "x"], [1, 2]]},
            "filtration": {"type": "cubical"},
        },
    ),
]

# Feature specs (RFC 9110 section 15.5.21 for fields, 15.5.5 for unknown ids; RFC 6901 pointers).
FEATURE_SPECS = [
    Case(
        "unknown feature type",
        "POST",
        "/v1/jobs",
        422,
        "/features/0/type",
        body=feature_job({"type": "everything", "dim": 0}),
    ),
    Case(
        "persistence image sigma zero",
        "POST",
        "/v1/jobs",
        422,
        "/features/0/sigma",
        body=feature_job({**IMAGE_FEATURE, "sigma": 0}),
    ),
    Case(
        "betti curve one sample",
        "POST",
        "/v1/jobs",
        422,
        "/features/0/samples",
        body=feature_job({**BETTI, "samples": 1}),
    ),
    Case(
        "feature dim not a number",
        "POST",
        "/v1/jobs",
        422,
        "/features/0/dim",
        body=feature_job({**BETTI, "dim": "zero"}),
    ),
    Case(
        "unknown spec_id in a job",
        "POST",
        "/v1/jobs",
        422,
        "/features/0/spec_id",
        body=feature_job({"spec_id": "a" * 64}),
    ),
    Case(
        "registered spec with a wrong spec_id",
        "POST",
        "/v1/feature-specs",
        422,
        "/spec_id",
        body={**BETTI, "spec_id": "b" * 64},
    ),
    Case(
        "registered spec body not json",
        "POST",
        "/v1/feature-specs",
        400,
        "body",
        raw=b"{",
    ),
    Case(
        "registered spec as text/plain",
        "POST",
        "/v1/feature-specs",
        415,
        "Content-Type",
        raw=json.dumps(BETTI).encode(),
        content_type="text/plain",
    ),
    Case("spec id not hex", "GET", "/v1/feature-specs/not-an-id", 404, "feature spec"),
    Case("spec id upper case", "GET", "/v1/feature-specs/" + "A" * 64, 404, "feature spec"),
]

# Distances (RFC 9110 section 15.5.21; RFC 6901 pointers, into lists too).
DISTANCES = [
    Case(
        "unknown metric",
        "POST",
        "/v1/distances",
        422,
        "/metric",
        body={"metric": "manhattan", "diagrams": [PAIRS, PAIRS]},
    ),
    Case(
        "wasserstein order below 1",
        "POST",
        "/v1/distances",
        422,
        "/order",
        body={"metric": "wasserstein", "order": 0.5, "diagrams": [PAIRS, PAIRS]},
    ),
    Case(
        "diagram pair is NaN",
        "POST",
        "/v1/distances",
        422,
        "/diagrams/1/0/0",
        body={"metric": "bottleneck", "diagrams": [PAIRS, [[float("nan"), 1.0]]]},
    ),
    Case(
        "unknown job id in a matrix",
        "POST",
        "/v1/distances",
        422,
        "/job_ids/1",
        body={"metric": "euclidean", "job_ids": [JOB, str(uuid.uuid4())]},
    ),
    Case(
        "brace-form job id in a matrix",
        "POST",
        "/v1/distances",
        422,
        "/job_ids/0",
        body={"metric": "euclidean", "job_ids": [BRACED, JOB]},
    ),
    Case(
        "vectors of one number missing",
        "POST",
        "/v1/distances",
        422,
        "/vectors/1",
        body={"metric": "euclidean", "vectors": [[1.0], []]},
    ),
]

# Multipart uploads (RFC 7578 multipart/form-data; RFC 9110 section 15.5.21). Truncated or
# corrupt files are refused whole: the PNG specification (ISO/IEC 15948, section 7.2) fixes
# how many bytes of scanlines an image decompresses to, and section 5.3 each chunk's CRC;
# TIFF 6.0's StripOffsets and StripByteCounts place every strip's bytes inside the file.
UPLOADS = [
    Case(
        "no request part",
        "POST",
        "/v1/jobs",
        422,
        "/request",
        parts={"data": npy(np.zeros((4, 4)))},
        present=False,
    ),
    Case(
        "no data part",
        "POST",
        "/v1/jobs",
        422,
        "/data",
        parts={"request": IMAGE_REQUEST},
        present=False,
    ),
    Case(
        "request part not json",
        "POST",
        "/v1/jobs",
        400,
        "request",
        parts={"request": "{", "data": npy(np.zeros((4, 4)))},
    ),
    Case(
        "request part file over 1 MiB",
        "POST",
        "/v1/jobs",
        422,
        "/request",
        parts={
            "request-file": json.dumps(IMAGE_REQUEST) + " " * (1024 * 1024),
            "data": npy(np.ones((4, 4))),
        },
    ),
    Case(
        "upload for a points input",
        "POST",
        "/v1/jobs",
        422,
        "/input/type",
        parts={"request": rips_job(), "data": npy(np.zeros((4, 4)))},
    ),
    Case(
        "png zlib stream ends early",
        "POST",
        "/v1/jobs",
        422,
        "/data",
        parts={"request": IMAGE_REQUEST, "data": png_rows(height=16, rows=8)},
    ),
    Case(
        "png with rows to spare",
        "POST",
        "/v1/jobs",
        422,
        "/data",
        parts={"request": IMAGE_REQUEST, "data": png_rows(height=8, rows=16)},
    ),
    Case(
        "png cut mid-file",
        "POST",
        "/v1/jobs",
        422,
        "/data",
        parts={"request": IMAGE_REQUEST, "data": png(np.full((32, 32), 9, np.uint8))[:-30]},
    ),
    Case(
        "png with a bad crc",
        "POST",
        "/v1/jobs",
        422,
        "/data",
        parts={"request": IMAGE_REQUEST, "data": png_rows(16, 16)[:-16] + bytes(4) + IEND},
    ),
    Case(
        "tiff with an empty strip",
        "POST",
        "/v1/jobs",
        422,
        "/data",
        parts={"request": IMAGE_REQUEST, "data": tiff_with_empty_strip()},
    ),
    Case(
        "deflate tiff with an empty strip",
        "POST",
        "/v1/jobs",
        422,
        "/data",
        parts={"request": IMAGE_REQUEST, "data": tiff_with_empty_strip("zlib")},
    ),
    Case(
        "tiff cut mid-strip",
        "POST",
        "/v1/jobs",
        422,
        "/data",
        parts={"request": IMAGE_REQUEST, "data": tiff_cut(None)},
    ),
    Case(
        "deflate tiff cut mid-strip",
        "POST",
        "/v1/jobs",
        422,
        "/data",
        parts={"request": IMAGE_REQUEST, "data": tiff_cut("zlib")},
    ),
    Case(
        "npy missing its last bytes",
        "POST",
        "/v1/jobs",
        422,
        "/data",
        parts={"request": IMAGE_REQUEST, "data": npy(np.ones((8, 8)))[:-3]},
    ),
    Case(
        "graphml with a doctype",
        "POST",
        "/v1/jobs",
        422,
        "/data",
        parts={
            "request": GRAPH_REQUEST,
            "data": b'<?xml version="1.0"?><!DOCTYPE graphml><graphml/>',
        },
    ),
    # XML 1.0 section 4.3.3: a processor need read only UTF-8 and UTF-16; an encoding the
    # parser cannot read (expat refuses multi-byte ones, an unknown name has no codec) is
    # refused at the file, like any other unreadable GraphML.
    Case(
        "graphml in a multi-byte encoding",
        "POST",
        "/v1/jobs",
        422,
        "/data",
        parts={
            "request": GRAPH_REQUEST,
            "data": graphml(node("a"), GRAPHML.replace("UTF-8", "shift_jis")),
        },
    ),
    Case(
        "graphml in an unknown encoding",
        "POST",
        "/v1/jobs",
        422,
        "/data",
        parts={
            "request": GRAPH_REQUEST,
            "data": graphml(node("a"), GRAPHML.replace("UTF-8", "bogus-enc")),
        },
    ),
    Case(
        "graphml edge to no node",
        "POST",
        "/v1/jobs",
        422,
        "/data",
        parts={
            "request": GRAPH_REQUEST,
            "data": graphml(node("a") + '<edge source="a" target="q"/>'),
        },
    ),
    Case(
        "graphml node without id",
        "POST",
        "/v1/jobs",
        422,
        "/data",
        parts={"request": GRAPH_REQUEST, "data": graphml(node("a").replace(' id="a"', ""))},
    ),
    Case(
        "graphml data of an undeclared key",
        "POST",
        "/v1/jobs",
        422,
        "/data",
        parts={
            "request": GRAPH_REQUEST,
            "data": graphml(node("a").replace("</node>", '<data key="w">1</data></node>')),
        },
    ),
    Case(
        "graphml key after the graph",
        "POST",
        "/v1/jobs",
        422,
        "/data",
        parts={
            "request": GRAPH_REQUEST,
            "data": graphml(node("a")).replace(
                b"</graphml>",
                b'<key id="r" for="node" attr.name="radius" attr.type="double"/></graphml>',
            ),
        },
    ),
    Case(
        "graphml root is not graphml",
        "POST",
        "/v1/jobs",
        422,
        "/data",
        parts={"request": GRAPH_REQUEST, "data": b'<svg xmlns="http://www.w3.org/2000/svg"/>'},
    ),
    Case(
        "graphml x not a number",
        "POST",
        "/v1/jobs",
        422,
        "/data",
        parts={"request": GRAPH_REQUEST, "data": graphml(node("a").replace(">0<", ">east<", 1))},
    ),
    Case(
        "graphml over the node limit",
        "POST",
        "/v1/jobs",
        422,
        "/data",
        parts={"request": GRAPH_REQUEST, "data": graphml("".join(node(f"n{i}") for i in range(4)))},
        settings={"max_graph_nodes": 3},
    ),
    Case(
        "graphml over the edge limit",
        "POST",
        "/v1/jobs",
        422,
        "/data",
        parts={
            "request": GRAPH_REQUEST,
            "data": graphml(node("a") + node("b") + '<edge source="a" target="b"/>' * 3),
        },
        settings={"max_graph_edges": 2},
    ),
]

# Headers: Accept (RFC 9110 section 12.5.1; 406 is section 15.5.7), Content-Type (section
# 8.3; 415 is section 15.5.16), Idempotency-Key (IETF httpapi draft: a Structured Fields
# string), Prefer (RFC 7240: a preference never excuses a bad request).
HEADERS = [
    Case(
        "accept xml on a submission",
        "POST",
        "/v1/jobs",
        406,
        "Accept",
        body=rips_job(),
        headers={"Accept": "application/xml"},
    ),
    Case(
        "accept xml on capabilities",
        "GET",
        "/v1/capabilities",
        406,
        "Accept",
        headers={"Accept": "application/xml"},
    ),
    Case(
        "accept xml on a job",
        "GET",
        f"/v1/jobs/{JOB}",
        406,
        "Accept",
        headers={"Accept": "application/xml"},
    ),
    Case(
        "accept html on a result",
        "GET",
        f"/v1/jobs/{JOB}/result",
        406,
        "Accept",
        headers={"Accept": "text/html"},
    ),
    Case(
        "accept png on the openapi document",
        "GET",
        "/v1/openapi.json",
        406,
        "Accept",
        headers={"Accept": "image/png"},
    ),
    Case(
        "accept with every type at q=0",
        "GET",
        "/v1/capabilities",
        406,
        "Accept",
        headers={"Accept": "*/*;q=0"},
    ),
    Case(
        "accept npy of a job without features",
        "POST",
        "/v1/jobs",
        406,
        "application/x-npy",
        body=rips_job(),
        headers={"Accept": NPY},
    ),
    Case(
        "content type text/plain",
        "POST",
        "/v1/jobs",
        415,
        "Content-Type",
        raw=json.dumps(rips_job()).encode(),
        content_type="text/plain",
    ),
    Case(
        "no content type",
        "POST",
        "/v1/jobs",
        415,
        "Content-Type",
        raw=json.dumps(rips_job()).encode(),
        content_type="",
    ),
    Case(
        "content type xml on distances",
        "POST",
        "/v1/distances",
        415,
        "Content-Type",
        raw=b"<distances/>",
        content_type="application/xml",
    ),
    Case(
        "empty idempotency key",
        "POST",
        "/v1/jobs",
        400,
        "Idempotency-Key",
        body=rips_job(),
        headers={"Idempotency-Key": ""},
    ),
    Case(
        "idempotency key of 256 characters",
        "POST",
        "/v1/jobs",
        400,
        "Idempotency-Key",
        body=rips_job(),
        headers={"Idempotency-Key": "k" * 256},
    ),
    Case(
        "idempotency key with a space",
        "POST",
        "/v1/jobs",
        400,
        "Idempotency-Key",
        body=rips_job(),
        headers={"Idempotency-Key": "two words"},
    ),
    Case(
        "idempotency key with a quote inside",
        "POST",
        "/v1/jobs",
        400,
        "Idempotency-Key",
        body=rips_job(),
        headers={"Idempotency-Key": '"a"b"'},
    ),
    Case(
        "prefer wait with an invalid body",
        "POST",
        "/v1/jobs",
        422,
        "/input/points/0/0",
        body=rips_job([["x", 0], [1, 1]]),
        headers={"Prefer": "wait=30"},
    ),
    Case(
        "prefer garbage with an invalid body",
        "POST",
        "/v1/jobs",
        422,
        "/filtration/type",
        body={"input": {"type": "points", "points": [[0, 0]]}, "filtration": {"type": "x"}},
        headers={"Prefer": "wait=abc, respond-async;;"},
    ),
]

# Job ids in the path: only the id a submission answered names a job (RFC 9110 section
# 15.5.5, 404), whatever uuid.UUID would also parse (braces, urn:uuid:, upper case).
IDS = [
    Case("brace-form id: status", "GET", f"/v1/jobs/{BRACED}", 404, "job"),
    Case("brace-form id: result", "GET", f"/v1/jobs/{BRACED}/result", 404, "job"),
    Case("brace-form id: plot", "GET", f"/v1/jobs/{BRACED}/plot", 404, "job"),
    Case("brace-form id: cancel", "DELETE", f"/v1/jobs/{BRACED}", 404, "job"),
    Case("urn form id", "GET", f"/v1/jobs/urn:uuid:{JOB}", 404, "job"),
    Case("upper-case id", "GET", f"/v1/jobs/{JOB.upper()}", 404, "job"),
    Case("id without hyphens", "GET", f"/v1/jobs/{JOB.replace('-', '')}", 404, "job"),
    Case("id of 20 kB", "GET", "/v1/jobs/" + "a" * 20_000, 404, "job"),
    Case("id with a NUL", "GET", f"/v1/jobs/{JOB[:-1]}%00", 404, "job"),
]

# Query strings of /plot, taken as an object for the pointers (RFC 6901; RFC 9110 section
# 15.5.21).
PLOT_QUERIES = [
    Case("plot kind unknown", "GET", f"/v1/jobs/{JOB}/plot", 422, "/kind", query={"kind": "pie"}),
    Case("plot width zero", "GET", f"/v1/jobs/{JOB}/plot", 422, "/width", query={"width": "0"}),
    Case(
        "plot width not a number",
        "GET",
        f"/v1/jobs/{JOB}/plot",
        422,
        "/width",
        query={"width": "wide"},
    ),
    Case(
        "plot height huge",
        "GET",
        f"/v1/jobs/{JOB}/plot",
        422,
        "/height",
        query={"height": "99999999"},
    ),
    Case("plot dim negative", "GET", f"/v1/jobs/{JOB}/plot", 422, "/dim", query={"dim": "-1"}),
    Case("plot format gif", "GET", f"/v1/jobs/{JOB}/plot", 422, "/format", query={"format": "gif"}),
    Case(
        "plot direction negative",
        "GET",
        f"/v1/jobs/{JOB}/plot",
        422,
        "/direction",
        query={"direction": "-2"},
    ),
    Case(
        "plot unknown parameter",
        "GET",
        f"/v1/jobs/{JOB}/plot",
        422,
        "/colour",
        query={"colour": "red"},
    ),
]

IN_PROCESS = JSON_BODIES + FEATURE_SPECS + DISTANCES + UPLOADS + HEADERS + IDS + PLOT_QUERIES


def _multipart(parts: dict[str, Any]) -> tuple[bytes, str]:
    """The body and Content-Type of a multipart request with ``parts``, encoded in memory
    (the test client's own encoder spools large bodies to files it leaves open)."""
    sent: dict[str, Any] = {}
    for name, value in parts.items():
        if name == "data":
            sent["data"] = FileStorage(io.BytesIO(value), "upload")
        elif name == "request-file":  # the request part sent as a file, not a text field
            sent["request"] = FileStorage(io.BytesIO(value.encode()), "request.json")
        else:
            sent[name] = value if isinstance(value, str) else json.dumps(value)
    boundary, body = encode_multipart(sent)
    return body, f"multipart/form-data; boundary={boundary}"


def _sent(case: Case) -> Any:
    """What the case's pointer is resolved against."""
    if case.query is not None:
        return case.query
    if case.parts is not None:
        request = case.parts.get("request")
        names = {"request" if name == "request-file" else name: v for name, v in case.parts.items()}
        return {**(request if isinstance(request, dict) else {}), **names}
    return case.body


def _check(case: Case, problem: dict[str, Any]) -> None:
    if case.names.startswith("/") or case.names == "":
        assert case.names in pointers_of(problem), problem
        document = _sent(case)
        if case.present:
            assert resolves(document, case.names), (case.names, document)
        else:  # a missing member: the pointer names it in an object that was sent
            parent = case.names.rsplit("/", 1)[0]
            assert resolves(document, parent) and not resolves(document, case.names)
    else:
        assert case.names.lower() in problem["detail"].lower(), problem["detail"]


@pytest.fixture
def apps(settings: Settings) -> Iterator[Callable[[dict[str, Any]], Flask]]:
    """Apps on the test's settings with a case's overrides."""

    def app_for(overrides: dict[str, Any]) -> Flask:
        app = create_app(settings.model_copy(update=overrides))
        app.testing = True
        return app

    yield app_for


@pytest.mark.parametrize("case", IN_PROCESS, ids=[case.id for case in IN_PROCESS])
def test_bad_input_is_a_problem_naming_the_field(
    case: Case, client: FlaskClient, apps: Callable[[dict[str, Any]], Flask]
) -> None:
    if case.settings:
        client = apps(case.settings).test_client()
    options: dict[str, Any] = {"headers": case.headers, "query_string": case.query}
    if case.parts is not None:
        data, content_type = _multipart(case.parts)
        options.update(data=data, content_type=content_type)
    elif case.body is not None:
        options.update(data=json.dumps(case.body), content_type="application/json")
    elif case.raw is not None:
        options.update(data=case.raw, content_type=case.content_type or "application/json")
        if case.content_type == "":
            options.pop("content_type")
    response = client.open(case.path, method=case.method, **options)
    assert 400 <= response.status_code < 500, response.get_data(as_text=True)
    _check(case, problem_of(response, case.status))
    assert stored_jobs(client) == 0  # nothing was queued


# Overload (RFC 9110 section 15.6.4, 503 with Retry-After, section 10.2.3): past the process's
# large parses a body is refused whole, before it is decoded, and says when to come back.
def test_a_large_body_past_the_parse_slots_is_503_with_retry_after(settings: Settings) -> None:
    app = create_app(settings.model_copy(update={"max_large_parses": 1, "large_body_bytes": 1024}))
    app.testing = True
    client = app.test_client()
    slots = app.extensions["lacuna.gates"].parses
    assert slots.acquire(blocking=False)  # another request is parsing a large body
    try:
        data, content_type = _multipart({"request": IMAGE_REQUEST, "data": npy(np.ones((64, 64)))})
        response = client.post("/v1/jobs", data=data, content_type=content_type)
        problem = problem_of(response, 503)
        assert problem["type"].endswith("server-busy")
        assert response.headers["Retry-After"] == str(settings.retry_after_s)
        assert stored_jobs(client) == 0
    finally:
        slots.release()
    # Once the slot is free the same request is taken, and its slot is given back.
    response = client.post("/v1/jobs", data=data, content_type=content_type)
    assert response.status_code == 202, response.get_data(as_text=True)
    assert slots.acquire(blocking=False)
    slots.release()


# What the HTTP server refuses before the app sees the request: RFC 9110 section 15.5.15
# (414), RFC 6585 section 5 (431), RFC 9112 section 3 (a request line; 400), all as RFC 9457
# problems like the app's own answers.
SERVER_CASES = [
    (
        "id of 20 kB through gunicorn",
        b"GET /v1/jobs/" + b"a" * 20_000 + b" HTTP/1.1\r\nHost: t\r\n\r\n",
        414,
        "request line",
    ),
    (
        "header of 10 kB",
        b"GET /healthz HTTP/1.1\r\nHost: t\r\nX-Note: " + b"n" * 10_000 + b"\r\n\r\n",
        431,
        "header",
    ),
    (
        "200 header fields",
        b"GET /healthz HTTP/1.1\r\nHost: t\r\n"
        + b"".join(b"X-%d: 1\r\n" % i for i in range(200))
        + b"\r\n",
        431,
        "header",
    ),
    ("request line without a version", b"GET /healthz\r\n\r\n", 400, "request line"),
    ("garbage request line", b"GARBAGE\r\n\r\n", 400, "request line"),
    ("unknown http version", b"GET /healthz HTTP/7.1\r\nHost: t\r\n\r\n", 400, "version"),
    (
        "header name with a space",
        b"GET /healthz HTTP/1.1\r\nHost: t\r\nBad Name: 1\r\n\r\n",
        400,
        "header",
    ),
]


@pytest.fixture(scope="module")
def server(redis_server: str) -> Iterator[str]:
    with gunicorn_api(redis_server, fresh_queue()) as base:
        yield base


def _raw_answer(base: str, request: bytes) -> tuple[int, str, dict[str, Any]]:
    """Status, Content-Type and JSON body of the answer to ``request`` sent as raw bytes."""
    address = urlsplit(base)
    with socket.create_connection((address.hostname, address.port), timeout=30) as connection:
        connection.sendall(request)
        answer = b""
        while chunk := connection.recv(65536):
            answer += chunk
    head, _, body = answer.partition(b"\r\n\r\n")
    lines = head.decode("latin-1").split("\r\n")
    headers = dict(line.split(": ", 1) for line in lines[1:])
    return int(lines[0].split()[1]), headers.get("Content-Type", ""), json.loads(body)


@pytest.mark.parametrize(
    ("request_bytes", "status", "word"),
    [case[1:] for case in SERVER_CASES],
    ids=[case[0] for case in SERVER_CASES],
)
def test_what_the_http_server_refuses_is_a_problem(
    server: str, request_bytes: bytes, status: int, word: str
) -> None:
    got, content_type, problem = _raw_answer(server, request_bytes)
    assert (got, content_type) == (status, PROBLEM_JSON)
    assert problem["status"] == status and problem["type"] == "about:blank"
    assert word in problem["detail"].lower(), problem
    assert requests.get(server + "/healthz", timeout=30).status_code == 200  # still serving
