"""The OpenAPI 3.1 document, generated from the pydantic models of ``workers.spec``.

``lacuna openapi`` (``make openapi``) writes it to ``openapi/openapi.json``; a test fails when the
committed copy differs from what this module generates.
"""

import json
from importlib.metadata import version
from typing import Any

from pydantic import BaseModel
from pydantic.json_schema import models_json_schema

from workers.spec import (
    NPY_MEDIA_TYPE,
    Capabilities,
    DistanceRequest,
    DistanceResult,
    FeatureSpecAnswer,
    JobRequest,
    JobResult,
    JobStatus,
    Problem,
)
from workers.spec.costs import CostEstimate
from workers.spec.features import FeatureSpecBody
from workers.spec.plots import PlotQuery

__all__ = ["openapi_document", "openapi_text"]

_REQUESTS: list[type[BaseModel]] = [JobRequest, DistanceRequest, FeatureSpecBody]
"""Bodies clients send: their schemas describe what is accepted (validation mode)."""

_MODELS: list[type[BaseModel]] = [
    *_REQUESTS,
    JobStatus,
    JobResult,
    DistanceResult,
    FeatureSpecAnswer,
    Problem,
    Capabilities,
    CostEstimate,
]

_DESCRIPTION = """\
Persistent homology as a service: post a point set, an image, a mask or a volume (or diagrams
you have), get persistence diagrams, fixed-length feature vectors under versioned feature
specs, and distances between diagrams back through a job queue.

Conventions: Vietoris-Rips values are edge lengths (diameters), not ball radii; a death of
null means the class never dies within the filtration; pairs are sorted by (birth, death).
Arithmetic is float64 throughout: values are exact pairwise distances of the input points.
Images and masks: pixels (voxels) are the top-dimensional cells of a cubical complex, so
foreground pixels touching at a corner are connected (8-connectivity in 2D, 26 in 3D) and
holes connect through shared sides (4 / 6); coordinates and spacing are in array-axis order
and pixel (0, 0) is centred at the origin; each result's value_convention says what its
numbers are, `units` the unit of those numbers (null for pixel and node values) and
`coordinate_units` the unit of the coordinates. Errors are RFC 9457 problem details; 422
answers list every offending field as a JSON Pointer.

Binary arrays out (feature vectors, distance matrices) are NumPy .npy bytes, media type
application/x-npy, little-endian float64 in C order; ask for them with that Accept header.
Binary arrays in (images, masks, volumes) come as multipart/form-data: a JSON `request` part
and a `data` file part (.npy, TIFF or PNG); graphs the same way, the data part a GraphML file.

Graphs: an edge enters with its later end; self-loops and repeated edges are dropped and named
in the result's warnings; `output` asks for diagrams, network descriptors and the graph.

Access: on a shared server every request but /healthz, /readyz and this document sends an
API key, `Authorization: Bearer <key>` (RFC 6750), and acts for the key's tenant: jobs,
results, pictures, feature specs and Idempotency-Keys of one tenant are invisible to another
(404). In open mode (one user on a loopback address) no key is needed. Each tenant has
quotas, shown with its usage in /v1/capabilities `caller`: above one the answer is 429 with
Retry-After (RFC 6585) naming the quota.

For research use only: results are not for diagnosis or treatment decisions.
"""


def _json(schema: str) -> dict[str, Any]:
    return {"application/json": {"schema": {"$ref": f"#/components/schemas/{schema}"}}}


def _json_examples(schema: str, examples: dict[str, tuple[str, Any]]) -> dict[str, Any]:
    """``_json(schema)`` with named example bodies (summary, value)."""
    media = _json(schema)
    media["application/json"]["examples"] = {
        name: {"summary": summary, "value": value} for name, (summary, value) in examples.items()
    }
    return media


_SQUARE = [[0.0, 0.0], [1.0, 0.0], [1.0, 1.0], [0.0, 1.0]]
"""The unit square: one loop, born at edge length 1 and dying at the diagonal, sqrt(2)."""

_BETTI_CURVE = {"type": "betti_curve", "dim": 1, "t_range": [0.0, 2.0], "samples": 5}

_JOB_EXAMPLES = {
    "rips": (
        "H0 and H1 of the unit square, and its H1 Betti curve",
        {
            "input": {"type": "points", "points": _SQUARE},
            "filtration": {"type": "rips", "max_dim": 1},
            "features": [_BETTI_CURVE],
        },
    ),
    "cubical": (
        "A 3 x 3 image with a bright ring around a dark centre (superlevel sets)",
        {
            "input": {
                "type": "image",
                "values": [[9.0, 9.0, 9.0], [9.0, 1.0, 9.0], [9.0, 9.0, 9.0]],
            },
            "filtration": {"type": "cubical", "direction": "superlevel"},
        },
    ),
}

_DISTANCE_EXAMPLES = {
    "bottleneck": (
        "Bottleneck distance between two H1 diagrams",
        {"metric": "bottleneck", "diagrams": [[[1.0, 1.5]], [[1.0, 2.0]]]},
    ),
    "euclidean": (
        "Euclidean distance between two feature vectors",
        {"metric": "euclidean", "vectors": [[0.0, 1.0, 2.0], [0.0, 1.0, 4.0]]},
    ),
}

_SPEC_EXAMPLES = {"betti_curve": ("A Betti curve of H1 at 5 values of t", _BETTI_CURVE)}


def _result(description: str) -> dict[str, Any]:
    """A result in JSON (a job's or a distance matrix's) or, on request, as .npy bytes."""
    return {
        "description": description,
        "content": {
            "application/json": {
                "schema": {
                    "oneOf": [
                        {"$ref": "#/components/schemas/JobResult"},
                        {"$ref": "#/components/schemas/DistanceResult"},
                    ]
                }
            },
            NPY_MEDIA_TYPE: {
                "schema": {
                    "type": "string",
                    "contentMediaType": NPY_MEDIA_TYPE,
                    "description": "With Accept: application/x-npy. A job: its concatenated "
                    "feature vector (vector_length,). A distance matrix: (N, N), inf where "
                    "classes that never die cannot be matched, NaN where cosine is undefined.",
                },
            },
        },
    }


def _problem(description: str) -> dict[str, Any]:
    return {
        "description": description,
        "content": {
            "application/problem+json": {"schema": {"$ref": "#/components/schemas/Problem"}}
        },
    }


_PREFER_WAIT = {
    "name": "Prefer",
    "in": "header",
    "required": False,
    "description": "RFC 7240 `wait=N`: block up to N seconds (capped, see /v1/capabilities) "
    "for the job to end before answering.",
    "schema": {"type": "string", "example": "wait=10"},
}

_IDEMPOTENCY_KEY = {
    "name": "Idempotency-Key",
    "in": "header",
    "required": False,
    "description": "A key of the client's choosing (1-255 visible ASCII characters, a UUID "
    "say, bare or as a quoted string). Within idempotency_ttl_s of its first use (24 h by "
    "default, see /v1/capabilities) the same key with the same request answers the job made "
    "the first time instead of queueing another; the same key with a different request is a "
    "422. Once that job's result has expired the key starts over. Keys are scoped by owner.",
    "schema": {
        "type": "string",
        "minLength": 1,
        "maxLength": 257,
        # what service.routes takes: visible ASCII (0x21-0x7e) without '"', or all that quoted
        "pattern": '^(?:"[!#-~]{1,255}"|[!#-~]{1,255})$',
        "example": "5f0c6d1e-0b7a-4c7e-9d2a-1b3c",
    },
}

_JOB_ID = {
    "name": "job_id",
    "in": "path",
    "required": True,
    "schema": {"type": "string", "format": "uuid"},
}
_UPLOAD = {
    "schema": {
        "type": "object",
        "required": ["request", "data"],
        "properties": {
            "request": {
                "$ref": "#/components/schemas/JobRequest",
                "description": "The JSON request: an image or mask input without values, or a "
                "graph input without nodes and edges.",
            },
            "data": {
                "type": "string",
                "contentMediaType": "application/octet-stream",
                "description": "The array as a file: .npy (NEP 1; numeric dtypes only, never "
                "unpickled), TIFF (2D, or a multi-page stack read as 3D; 8/16/32-bit integers "
                "or floats, one channel) or PNG (grayscale, 1/8/16-bit). The format is told "
                "from the first bytes. Shapes over the limits are refused before the pixels "
                "are read. For a graph input: GraphML (node attributes x, y and, in 3D, z; "
                "optional node attribute radius and edge attribute length; at most "
                "max_body_bytes; files with DOCTYPE or ENTITY declarations are refused).",
            },
        },
    },
    "encoding": {"request": {"contentType": "application/json"}},
}
"""The one way binary inputs arrive: a JSON ``request`` part and a ``data`` file part."""


def _query_parameters(model: type[BaseModel]) -> list[dict[str, Any]]:
    """The fields of a query model as OpenAPI query parameters (the model is their source)."""
    schema = model.model_json_schema()
    parameters = []
    for name, field in schema["properties"].items():
        field = dict(field)
        field.pop("title", None)
        description = field.pop("description", None)
        parameter = {"name": name, "in": "query", "required": False, "schema": field}
        if description:
            parameter["description"] = description
        parameters.append(parameter)
    return parameters


_HTML_PAGE = {
    "text/html": {
        "schema": {"type": "string"},
        "example": "<!doctype html>...",
    }
}

_JOB_LINKS = {
    name: {
        "operationId": operation,
        "parameters": {"job_id": "$response.body#/job_id"},
        "description": description,
    }
    for name, operation, description in [
        ("status", "getJob", "The job's state (GET /v1/jobs/{job_id})."),
        ("result", "getResult", "The job's result (GET /v1/jobs/{job_id}/result)."),
        ("plot", "getPlot", "A picture of the job (GET /v1/jobs/{job_id}/plot)."),
        ("cancel", "cancelJob", "Cancel the job (DELETE /v1/jobs/{job_id})."),
    ]
}
"""OpenAPI links from an answer naming a job to the operations on it."""

_SPEC_LINKS = {
    "spec": {
        "operationId": "getFeatureSpec",
        "parameters": {"spec_id": "$response.body#/spec_id"},
        "description": "The registered spec (GET /v1/feature-specs/{spec_id}).",
    }
}


def _linked(response: dict[str, Any], links: dict[str, Any]) -> dict[str, Any]:
    return {**response, "links": links}


_HEALTH = {
    "application/json": {
        "schema": {
            "type": "object",
            "required": ["status"],
            "properties": {"status": {"const": "ok"}},
        }
    }
}
_READY = {
    "application/json": {
        "schema": {
            "type": "object",
            "required": ["status", "workers"],
            "properties": {
                "status": {"const": "ready"},
                "workers": {
                    "type": "integer",
                    "minimum": 1,
                    "description": "Workers registered on the queue.",
                },
            },
        }
    }
}

_UNAVAILABLE = _problem(
    "Redis cannot be reached, or (server-busy) this API process is parsing as many large "
    "bodies as it may; retry after the Retry-After header."
)
_NOT_FOUND = _problem("No such job for this owner, or it has expired.")
_PICTURE_HEADERS = {
    "ETag": {
        "description": "Strong validator of the picture (the job, the owner, the normalised "
        "query, the drawing's version and lacuna's).",
        "schema": {"type": "string"},
    },
    "Cache-Control": {
        "description": "private, max-age=<seconds the job's result has left>.",
        "schema": {"type": "string"},
    },
}
_IF_NONE_MATCH = {
    "name": "If-None-Match",
    "in": "header",
    "required": False,
    "description": "ETags of pictures held (weak comparison, RFC 9110 section 13.1.2): 304 "
    "when one is this picture's.",
    "schema": {"type": "string"},
}


def _paths() -> dict[str, Any]:
    return {
        "/v1/jobs": {
            "post": {
                "summary": "Submit a job",
                "operationId": "submitJob",
                "parameters": [_PREFER_WAIT, _IDEMPOTENCY_KEY],
                "requestBody": {
                    "required": True,
                    "content": {
                        **_json_examples("JobRequest", _JOB_EXAMPLES),
                        "multipart/form-data": _UPLOAD,
                    },
                },
                "responses": {
                    "200": _linked(_result("Finished within Prefer: wait."), _JOB_LINKS),
                    "202": _linked(
                        {
                            "description": "Accepted; not succeeded within any Prefer: wait "
                            "(queued, running, failed or cancelled: see status and problem). "
                            "Poll the Location header.",
                            "headers": {"Location": {"schema": {"type": "string"}}},
                            "content": _json("JobStatus"),
                        },
                        _JOB_LINKS,
                    ),
                    "400": _problem("The body is not JSON, or the Idempotency-Key is unusable."),
                    "406": _problem(
                        "Asked for application/x-npy for a job without features (no vector)."
                    ),
                    "413": _problem(
                        "The body is above the size limit (max_body_bytes for JSON, "
                        "max_upload_bytes for multipart)."
                    ),
                    "415": _problem(
                        "The Content-Type is neither application/json nor multipart/form-data."
                    ),
                    "422": _problem(
                        "The request is invalid; `errors` points at each field (`/data` is "
                        "the uploaded file). Or the Idempotency-Key was used with another "
                        "request. Or the job is estimated to cost more than the limits "
                        "allow (too-costly: `estimate` holds the estimate, `errors` the field "
                        "that drives the cost)."
                    ),
                    "503": _UNAVAILABLE,
                },
            }
        },
        "/v1/jobs/{job_id}": {
            "parameters": [_JOB_ID],
            "get": {
                "summary": "State and timestamps of a job",
                "description": "Timestamps are RFC 3339 in UTC with a Z. With Accept: "
                "text/html (a browser) the answer is a small page without script or external "
                "asset: the status with a progress bar (the page reloads itself every 2 s "
                "until the job ends), the pictures (images from GET /v1/jobs/{job_id}/plot), "
                "pair counts per dimension, the units of values and coordinates, the feature "
                "vector layout, the request as sent, download links and the research-use "
                "caution; an unknown job is a 404 page.",
                "operationId": "getJob",
                "parameters": [_PREFER_WAIT],
                "responses": {
                    "200": {
                        "description": "The job.",
                        "content": {**_json("JobStatus"), **_HTML_PAGE},
                    },
                    "404": {
                        **_NOT_FOUND,
                        "content": {**_NOT_FOUND["content"], **_HTML_PAGE},
                    },
                    "503": _UNAVAILABLE,
                },
            },
            "delete": {
                "summary": "Cancel a queued or running job",
                "operationId": "cancelJob",
                "responses": {
                    "200": {"description": "Cancelled.", "content": _json("JobStatus")},
                    "202": {
                        "description": "Running; its computation is being stopped (within about "
                        "50 ms). Poll the job to see it cancelled.",
                        "content": _json("JobStatus"),
                    },
                    "404": _NOT_FOUND,
                    "409": _problem("The job has already ended."),
                    "503": _UNAVAILABLE,
                },
            },
        },
        "/v1/jobs/{job_id}/result": {
            "parameters": [_JOB_ID],
            "get": {
                "summary": "Result of a succeeded job",
                "operationId": "getResult",
                "parameters": [_PREFER_WAIT],
                "responses": {
                    "200": _result("The result."),
                    "406": _problem("Asked for application/x-npy; this result has no array."),
                    "404": _NOT_FOUND,
                    "409": _problem("The job has not succeeded (yet)."),
                    "503": _UNAVAILABLE,
                },
            },
        },
        "/v1/jobs/{job_id}/plot": {
            "parameters": [_JOB_ID],
            "get": {
                "summary": "A picture of a succeeded job",
                "description": "Drawn on a worker within max_wait_s: the persistence diagram "
                "(death against birth; each dimension with its own colour and marker shape, H0 "
                "circle, H1 triangle, H2 square, H3 diamond; classes that never die in a strip "
                "labelled never dies above the diagram; the half-plane death < birth shaded; "
                "the legend outside the axes with each dimension's pair count), the barcode "
                "(one bar per class, those that never die running into a strip on the right), "
                "a persistence image the job computed as a feature (colour bar: intensity), or "
                "kind=matrix: the heatmap of a POST /v1/distances job (rows and columns the "
                "items, null distances hatched and explained). Axes name the value and its "
                "units; a caption says what min_persistence or top left out. In SVG each point "
                "is a group with id point-<dim>-<k> (bars bar-<dim>-<k>), k the pair's row in "
                "the result, up to 20000; above that, one group per dimension (point-<dim>s, "
                "point-<dim>s-never in the strip, bar-<dim>s). A picture is drawn once per job "
                "and query and then answered from Redis (within picture_cache_max_bytes per "
                "picture and picture_cache_bytes_per_job per job) for the rest of the job's "
                "result TTL. The query is checked against the job before If-None-Match, which "
                "compares weakly (RFC 9110 section 13.1.2). Query error pointers point into the "
                "query taken as an object (`/dim` is `?dim=`).",
                "operationId": "getPlot",
                "parameters": [*_query_parameters(PlotQuery), _IF_NONE_MATCH],
                "responses": {
                    "200": {
                        "description": "The picture.",
                        "headers": _PICTURE_HEADERS,
                        "content": {
                            "image/svg+xml": {"schema": {"type": "string"}},
                            "image/png": {
                                "schema": {"type": "string", "contentMediaType": "image/png"}
                            },
                        },
                    },
                    "304": {
                        "description": "Not modified: If-None-Match names the picture's ETag "
                        "(or is *); no body.",
                        "headers": _PICTURE_HEADERS,
                    },
                    "404": _NOT_FOUND,
                    "409": _problem("The job has not succeeded (yet)."),
                    "422": _problem(
                        "A query parameter is invalid, or the job has nothing of that kind to "
                        "draw (`errors` names the parameter)."
                    ),
                    "503": _problem(
                        "Redis cannot be reached, or the picture was not drawn in time."
                    ),
                },
            },
        },
        "/v1/feature-specs": {
            "post": {
                "summary": "Check and register a feature spec",
                "description": "Answers the canonical form and its spec_id (SHA-256 of the "
                "canonical JSON). Jobs may then name the spec by id alone. Specs are kept per "
                "tenant, at most max_feature_specs at a time, each until feature_spec_ttl_s "
                "after its last registration or use (see caller in /v1/capabilities).",
                "operationId": "registerFeatureSpec",
                "requestBody": {
                    "required": True,
                    "content": _json_examples("FeatureSpecBody", _SPEC_EXAMPLES),
                },
                "responses": {
                    "200": _linked(
                        {
                            "description": "Registered (again, if it already was).",
                            "headers": {"Location": {"schema": {"type": "string"}}},
                            "content": _json("FeatureSpecAnswer"),
                        },
                        _SPEC_LINKS,
                    ),
                    "400": _problem("The body is not JSON."),
                    "413": _problem("The body is above the size limit (max_body_bytes)."),
                    "415": _problem("The Content-Type is not application/json."),
                    "422": _problem("The spec is invalid; `errors` points at each field."),
                    "503": _UNAVAILABLE,
                },
            }
        },
        "/v1/feature-specs/{spec_id}": {
            "parameters": [
                {
                    "name": "spec_id",
                    "in": "path",
                    "required": True,
                    "schema": {"type": "string", "pattern": "^[0-9a-f]{64}$"},
                }
            ],
            "get": {
                "summary": "A registered feature spec",
                "operationId": "getFeatureSpec",
                "responses": {
                    "200": {"description": "The spec.", "content": _json("FeatureSpecAnswer")},
                    "404": _problem("No spec is registered under this id."),
                    "503": _UNAVAILABLE,
                },
            },
        },
        "/v1/distances": {
            "post": {
                "summary": "Distance matrix between diagrams or feature vectors",
                "description": "Runs as a job. Matrices of at most `inline_distance_pairs` "
                "pairs are waited for (up to the wait cap) and answered with 200; larger ones "
                "answer 202 with the job, whose status shows progress, unless Prefer: wait "
                "says otherwise.",
                "operationId": "submitDistances",
                "parameters": [_PREFER_WAIT, _IDEMPOTENCY_KEY],
                "requestBody": {
                    "required": True,
                    "content": _json_examples("DistanceRequest", _DISTANCE_EXAMPLES),
                },
                "responses": {
                    "200": _linked(_result("The matrix, finished in time."), _JOB_LINKS),
                    "202": _linked(
                        {
                            "description": "Accepted; poll the Location header.",
                            "headers": {"Location": {"schema": {"type": "string"}}},
                            "content": _json("JobStatus"),
                        },
                        _JOB_LINKS,
                    ),
                    "400": _problem("The body is not JSON, or the Idempotency-Key is unusable."),
                    "413": _problem("The body is above the size limit."),
                    "415": _problem("The Content-Type is not application/json."),
                    "422": _problem(
                        "The request is invalid, or a job id is unknown, unfinished or failed; "
                        "`errors` points at each field. Or the Idempotency-Key was used with "
                        "another request. Or the matrix is estimated to cost "
                        "more than the limits allow (too-costly, with `estimate`)."
                    ),
                    "503": _UNAVAILABLE,
                },
            }
        },
        "/v1/estimates": {
            "post": {
                "summary": "Estimate the time and memory of a job or distance matrix",
                "description": "Takes the body of POST /v1/jobs (JSON with `input`, or "
                "multipart/form-data with request and data parts) or of POST /v1/distances "
                "(JSON without `input`), checks it the same way, and answers what it would "
                "cost, from a model fitted on measurements (`fit` says how well), against "
                "the job limits; nothing is queued. Those endpoints refuse (422 too-costly) "
                "what this answers with refused: true.",
                "operationId": "estimateJob",
                "requestBody": {
                    "required": True,
                    "content": {
                        "application/json": {
                            "schema": {
                                "oneOf": [
                                    {"$ref": "#/components/schemas/JobRequest"},
                                    {"$ref": "#/components/schemas/DistanceRequest"},
                                ]
                            }
                        },
                        "multipart/form-data": _UPLOAD,
                    },
                },
                "responses": {
                    "200": {"description": "The estimate.", "content": _json("CostEstimate")},
                    "400": _problem("The body is not JSON."),
                    "413": _problem("The body is above the size limit."),
                    "415": _problem(
                        "The Content-Type is neither application/json nor multipart/form-data."
                    ),
                    "422": _problem("The request is invalid; `errors` points at each field."),
                    "503": _UNAVAILABLE,
                },
            }
        },
        "/v1/capabilities": {
            "get": {
                "summary": "Input types, filtrations, limits, versions; the caller's quotas",
                "operationId": "getCapabilities",
                "responses": {
                    "200": {"description": "Capabilities.", "content": _json("Capabilities")}
                },
            }
        },
        "/v1/openapi.json": {
            "get": {
                "summary": "This document",
                "operationId": "getOpenapi",
                "responses": {
                    "200": {
                        "description": "OpenAPI 3.1 document.",
                        "content": {"application/json": {}},
                    }
                },
            }
        },
        "/healthz": {
            "get": {
                "summary": "The process is up",
                "operationId": "getHealth",
                "responses": {"200": {"description": "Up.", "content": _HEALTH}},
            }
        },
        "/readyz": {
            "get": {
                "summary": "Redis answers and a live worker (one that beats) is registered",
                "operationId": "getReady",
                "responses": {
                    "200": {"description": "Ready.", "content": _READY},
                    "503": _problem("Not ready."),
                },
            }
        },
        "/metrics": {
            "get": {
                "summary": "Metrics for operators, in the Prometheus text format",
                "description": "HTTP answers by route and status, the queue's depth, jobs by "
                "state, job durations and failures by reason. Meant for a monitoring system "
                "on the operators' network; it asks for no API key.",
                "operationId": "getMetrics",
                "responses": {
                    "200": {
                        "description": "The Prometheus text exposition format 0.0.4.",
                        "content": {"text/plain": {"schema": {"type": "string"}}},
                    }
                },
            }
        },
    }


_SECURITY_SCHEMES = {
    "apiKey": {
        "type": "http",
        "scheme": "bearer",
        "description": "An API key from `lacuna keys create --tenant NAME`, sent as "
        "`Authorization: Bearer <key>` (RFC 6750). Not needed in open mode.",
    }
}

_OPEN_PATHS = frozenset({"/v1/openapi.json", "/healthz", "/readyz", "/metrics"})
"""Paths that need no key and use no rate."""

_ACCESS_RESPONSES = {
    "401": {
        **_problem(
            "No API key, or an unknown or revoked one (keys mode); WWW-Authenticate: Bearer."
        ),
        "headers": {"WWW-Authenticate": {"schema": {"type": "string"}}},
    },
    "429": {
        **_problem(
            "The tenant's request rate or a quota is used up (`quota` names it); retry after "
            "Retry-After seconds."
        ),
        "headers": {"Retry-After": {"schema": {"type": "integer"}}},
    },
}


_NOT_ACCEPTABLE = _problem(
    "The Accept header allows none of the media types this operation answers with (RFC 9110 "
    "section 12.5.1); problem+json is always sent for errors."
)


def _with_access(paths: dict[str, Any]) -> dict[str, Any]:
    """Every operation with its security: a key (or none in open mode), 401 and 429 answers,
    and the 406 of content negotiation; the open paths need nothing."""
    for path, item in paths.items():
        for method, operation in item.items():
            if method == "parameters":
                continue
            responses = operation["responses"]
            if path != "/metrics":  # plain text whatever the Accept header says
                responses.setdefault("406", _NOT_ACCEPTABLE)
            if path in _OPEN_PATHS:
                operation["security"] = []
                operation["responses"] = dict(sorted(responses.items()))
                continue
            for status, response in _ACCESS_RESPONSES.items():
                responses.setdefault(status, response)
            operation["responses"] = dict(sorted(responses.items()))
    return paths


def openapi_document() -> dict[str, Any]:
    """The document as a dict."""
    _, top = models_json_schema(
        [(model, "validation" if model in _REQUESTS else "serialization") for model in _MODELS],
        ref_template="#/components/schemas/{model}",
    )
    return {
        "openapi": "3.1.0",
        "info": {"title": "lacuna", "version": version("lacuna"), "description": _DESCRIPTION},
        "paths": _with_access(_paths()),
        # Open mode takes requests without a key too: hence the empty alternative.
        "security": [{"apiKey": []}, {}],
        "components": {"schemas": top["$defs"], "securitySchemes": _SECURITY_SCHEMES},
    }


def openapi_text() -> str:
    """The document as committed: indented JSON with a trailing newline."""
    return json.dumps(openapi_document(), indent=2, sort_keys=False) + "\n"
