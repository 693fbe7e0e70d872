"""The committed OpenAPI document is what the models generate, and it is valid OpenAPI 3.1;
the rules between fields that it states are the ones the API enforces; its links and examples
work; and answers the fuzzer (tests/fuzz) cannot reach are declared as well."""

import json
import re
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from flask.testing import FlaskClient
from jsonschema import Draft202012Validator  # type: ignore[import-untyped]
from openapi_spec_validator import validate

from service.openapi import openapi_document, openapi_text
from tests.support.api import app_with, call, fresh_queue, pointers_of, post, problem_of
from workers.spec import NPY_MEDIA_TYPE as NPY

COMMITTED = Path(__file__).resolve().parents[2] / "openapi" / "openapi.json"


def test_committed_document_is_current() -> None:
    assert COMMITTED.read_text(encoding="utf-8") == openapi_text(), (
        "openapi/openapi.json is stale: run `make openapi` and commit it"
    )


def test_document_is_valid_openapi() -> None:
    # Reference validator: openapi-spec-validator (OpenAPI 3.1 meta-schema).
    validate(openapi_document())


def test_every_route_is_documented() -> None:
    from service.app import create_app
    from service.settings import Settings

    app = create_app(Settings(redis_url="redis://127.0.0.1:1/0"))
    documented = {
        (path, method.upper())
        for path, item in openapi_document()["paths"].items()
        for method in item
        if method != "parameters"
    }
    routed = {
        (re.sub(r"<(\w+)>", r"{\1}", rule.rule), method)
        for rule in app.url_map.iter_rules()
        for method in rule.methods or ()
        if method not in {"HEAD", "OPTIONS"}
    }
    assert routed == documented


def test_the_routes_open_without_a_key_are_the_ones_documented_open(redis_url: str) -> None:
    # The document marks an open operation with `security: []` (OpenAPI 3.1 section 4.8.10:
    # an empty list removes the requirement); in keys mode every other one is a 401 without
    # a key (RFC 6750 section 3), whatever else is wrong with the request.
    client = app_with(redis_url=redis_url, queue=fresh_queue(), auth="keys").test_client()
    for path, item in openapi_document()["paths"].items():
        for method, operation in item.items():
            if method == "parameters":
                continue
            url = re.sub(r"\{\w+\}", "00000000-0000-4000-8000-000000000000", path)
            answered = client.open(url, method=method.upper()).status_code
            documented_open = operation.get("security") == []
            assert (answered != 401) == documented_open, (method, path, answered)


# --- The rules between fields, as the document states them ------------------------------------
# Each rule is checked twice: the document's schema (validated with jsonschema, the reference
# JSON Schema 2020-12 implementation) refuses a body breaking it, and the app refuses the same
# body with a 422 whose errors point at the field (RFC 9457 problem, RFC 6901 pointers).


def _document_accepts(schema: str, body: Any) -> bool:
    """Whether ``body`` is valid against the document's ``schema`` component."""
    document = openapi_document()
    root = {"$ref": f"#/components/schemas/{schema}", "components": document["components"]}
    return bool(Draft202012Validator(root).is_valid(body))


@pytest.fixture
def client(redis_url: str) -> FlaskClient:
    # max_wait_s=0: a valid body is queued and answered 202 at once (no worker runs here).
    return app_with(redis_url=redis_url, queue=fresh_queue(), max_wait_s=0).test_client()


_DIAGRAMS = [[[0.0, 1.0]], [[0.0, 2.0]]]
_VECTORS = [[0.0, 1.0], [1.0, 1.0]]

DISTANCE_RULES = [
    # (body, pointer of the error the app answers; None: valid)
    ({"metric": "bottleneck", "diagrams": _DIAGRAMS}, None),
    ({"metric": "cosine", "vectors": _VECTORS}, None),
    ({"metric": "bottleneck", "diagrams": _DIAGRAMS, "vectors": _VECTORS}, ""),
    ({"metric": "bottleneck", "diagrams": _DIAGRAMS, "job_ids": ["a"], "dim": 0}, ""),
    ({"metric": "bottleneck"}, ""),
    ({"metric": "bottleneck", "diagrams": _DIAGRAMS, "vectors": None}, None),
    ({"metric": "bottleneck", "vectors": _VECTORS}, "/vectors"),
    ({"metric": "euclidean", "diagrams": _DIAGRAMS}, "/diagrams"),
    ({"metric": "bottleneck", "diagrams": _DIAGRAMS, "order": 2}, "/order"),
    ({"metric": "wasserstein", "diagrams": _DIAGRAMS, "order": 2}, None),
    ({"metric": "wasserstein", "diagrams": _DIAGRAMS, "directions": 5}, "/directions"),
    ({"metric": "euclidean", "vectors": _VECTORS, "dim": 1}, "/dim"),
    ({"metric": "bottleneck", "job_ids": ["a", "b"]}, "/dim"),
]


@pytest.mark.parametrize(("body", "pointer"), DISTANCE_RULES)
def test_distance_rules_are_stated(
    client: FlaskClient, body: dict[str, Any], pointer: str | None
) -> None:
    assert _document_accepts("DistanceRequest", body) is (pointer is None)
    if pointer is None:
        assert post(client, "/v1/distances", body).status_code == 202
    else:
        assert pointer in pointers_of(problem_of(post(client, "/v1/distances", body), 422))


def test_exactly_one_source_is_a_one_of() -> None:
    schema = openapi_document()["components"]["schemas"]["DistanceRequest"]
    assert [branch["required"] for branch in schema["oneOf"]] == [
        ["diagrams"],
        ["vectors"],
        ["job_ids"],
    ]


_INPUTS: dict[str, dict[str, Any]] = {
    "points": {"type": "points", "points": [[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]]},
    "diagrams": {"type": "diagrams", "diagrams": [{"dim": 0, "pairs": [[0.0, None]]}]},
    "image": {"type": "image", "values": [[0.0, 1.0], [2.0, 3.0]]},
    "mask": {"type": "mask", "values": [[1, 1, 1], [1, 0, 1], [1, 1, 1]]},
    "skeleton": {"type": "mask", "values": [[0, 0, 0], [1, 1, 1], [0, 0, 0]], "skeletonize": True},
    "graph": {"type": "graph", "nodes": [[0.0, 0.0], [1.0, 0.0]], "edges": [[0, 1]]},
}
_FILTRATIONS: dict[str, dict[str, Any] | None] = {
    "none": None,
    "rips": {"type": "rips", "max_dim": 1},
    "cubical": {"type": "cubical"},
    "distance": {"type": "distance"},
    "height": {"type": "height", "direction": [0.0, 1.0]},
    "radial": {"type": "radial", "center": [0.0, 0.0]},
    "geodesic": {"type": "geodesic", "seeds": [0]},
    "attribute": {"type": "attribute", "values": [0.0, 1.0]},
}


def _job(input_name: str, filtration_name: str, output: list[str] | None) -> dict[str, Any]:
    body: dict[str, Any] = {"input": _INPUTS[input_name]}
    if _FILTRATIONS[filtration_name] is not None:
        body["filtration"] = _FILTRATIONS[filtration_name]
    if output is not None:
        body["output"] = output
    return body


_FILTRATION_CASES = [
    (input_name, filtration_name, output)
    for input_name in _INPUTS
    for filtration_name in _FILTRATIONS
    for output in ([None, ["descriptors"]] if input_name in ("graph", "skeleton") else [None])
]
"""Every input with every filtration type and none; graphs also asking for descriptors only."""


@pytest.mark.parametrize(("input_name", "filtration_name", "output"), _FILTRATION_CASES)
def test_filtration_rules_are_stated(
    client: FlaskClient, input_name: str, filtration_name: str, output: list[str] | None
) -> None:
    """Which filtration each input takes: the document says what the input kinds check."""
    body = _job(input_name, filtration_name, output)
    answer = post(client, "/v1/jobs", body)
    if _document_accepts("JobRequest", body):
        assert answer.status_code == 202, answer.get_data(as_text=True)
    else:
        pointers = pointers_of(problem_of(answer, 422))
        assert {"/filtration", "/filtration/type"} & set(pointers), pointers


def test_filtration_rules_can_refuse() -> None:
    """The matrix above holds refusals as well as acceptances (a check that can fail)."""
    verdicts = {
        _document_accepts("JobRequest", _job(i, f, None)) for i in _INPUTS for f in _FILTRATIONS
    }
    assert verdicts == {True, False}


_MASK = _INPUTS["mask"]
_GRAPH = _INPUTS["graph"]
_HEIGHT = {"type": "height", "direction": [0.0, 1.0]}

JOB_RULES = [
    # (body, pointer of the error the app answers; None: valid)
    ({"input": _GRAPH, "filtration": _HEIGHT, "output": ["diagrams", "descriptors"]}, None),
    ({"input": _GRAPH, "filtration": _HEIGHT, "output": ["diagrams", "diagrams"]}, "/output"),
    ({"input": _MASK, "filtration": _HEIGHT, "output": ["descriptors"]}, "/output"),
    ({"input": _MASK, "filtration": _HEIGHT, "output": ["graph"]}, "/output"),
    ({"input": _GRAPH, "filtration": _HEIGHT, "descriptors": {}}, "/descriptors"),
    ({"input": _GRAPH, "output": ["descriptors"], "descriptors": {}}, None),
    ({"input": _MASK, "filtration": {"type": "height", "directions": 4}}, None),
    ({"input": _MASK, "filtration": {"type": "height"}}, "/filtration/direction"),
    (
        {"input": _MASK, "filtration": {**_HEIGHT, "directions": [[1.0, 0.0]]}},
        "/filtration/direction",
    ),
]


@pytest.mark.parametrize(("body", "pointer"), JOB_RULES)
def test_job_rules_are_stated(
    client: FlaskClient, body: dict[str, Any], pointer: str | None
) -> None:
    assert _document_accepts("JobRequest", body) is (pointer is None)
    answer = post(client, "/v1/jobs", body)
    if pointer is None:
        assert answer.status_code == 202, answer.get_data(as_text=True)
    else:
        assert pointer in pointers_of(problem_of(answer, 422))


@pytest.mark.parametrize(
    ("feature", "pointer"),
    [
        ({"infinite": "cap", "cap": 3.0}, None),
        ({"infinite": "cap"}, "/cap"),
        ({"infinite": "drop", "cap": 3.0}, "/cap"),
        ({"cap": 3.0}, "/cap"),
        ({"type": "summary", "quantiles": [0.5, 0.9]}, None),
        ({"type": "summary", "quantiles": [0.5, 0.5]}, "/quantiles"),
    ],
)
def test_feature_rules_are_stated(
    client: FlaskClient, feature: dict[str, Any], pointer: str
) -> None:
    """A cap goes with infinite "cap" and only with it; quantiles are distinct."""
    body = {"type": "betti_curve", "dim": 0, "t_range": [0.0, 1.0], "samples": 3}
    if feature.get("type") == "summary":
        body = {"type": "summary", "dim": 0}
    body = {**body, **feature}
    assert _document_accepts("FeatureSpecBody", body) is (pointer is None)
    answer = post(client, "/v1/feature-specs", body)
    if pointer is None:
        assert answer.status_code == 200, answer.get_data(as_text=True)
    else:
        assert pointers_of(problem_of(answer, 422)) == [pointer]


def _ranges(schema: Any) -> Iterator[tuple[str, dict[str, Any]]]:
    """Every property named ``*_range`` in the document's component schemas."""
    for name, component in schema.items():
        for field_name, field in component.get("properties", {}).items():
            if field_name.endswith("_range"):
                yield f"{name}.{field_name}", field


def test_low_below_high_is_in_the_descriptions(client: FlaskClient) -> None:
    # JSON Schema cannot compare two items of an array, so the rule is in words.
    ranges = dict(_ranges(openapi_document()["components"]["schemas"]))
    assert {"PersistenceImageSpec.birth_range", "LandscapeSpec.t_range"} <= set(ranges)
    for name, field in ranges.items():
        assert "low < high" in field.get("description", ""), name
    body = {"type": "betti_curve", "dim": 0, "t_range": [1.0, 1.0], "samples": 3}
    assert _document_accepts("FeatureSpecBody", body)  # the schema alone cannot refuse it
    answer = post(client, "/v1/feature-specs", body)
    assert pointers_of(problem_of(answer, 422)) == ["/t_range"]


# --- Links and examples ------------------------------------------------------------------------


def _operations() -> dict[str, dict[str, Any]]:
    """Each operation by its operationId, with the names of the parameters it takes (its own
    and its path's) under ``"taking"``."""
    found = {}
    for item in openapi_document()["paths"].values():
        shared = [parameter["name"] for parameter in item.get("parameters", [])]
        for method, operation in item.items():
            if method != "parameters":
                own = [parameter["name"] for parameter in operation.get("parameters", [])]
                found[operation["operationId"]] = {**operation, "taking": shared + own}
    return found


def test_links_name_operations_and_fields_that_exist() -> None:
    operations = _operations()
    schemas = openapi_document()["components"]["schemas"]
    linked = set()
    for source in ("submitJob", "submitDistances", "registerFeatureSpec"):
        for status, response in operations[source]["responses"].items():
            # the models the answer's JSON body can be: each must carry the linked field
            body = response.get("content", {}).get("application/json", {})
            models = re.findall(r"#/components/schemas/(\w+)", json.dumps(body))
            for link in response.get("links", {}).values():
                linked.add((source, status, link["operationId"]))
                for parameter, expression in link["parameters"].items():
                    assert parameter in operations[link["operationId"]]["taking"]
                    member = expression.removeprefix("$response.body#/")
                    assert models and all(member in schemas[m]["properties"] for m in models)
    for source in ("submitJob", "submitDistances"):
        for status in ("200", "202"):
            for target in ("getJob", "getResult", "getPlot", "cancelJob"):
                assert (source, status, target) in linked
    assert ("registerFeatureSpec", "200", "getFeatureSpec") in linked


@pytest.mark.parametrize(
    ("operation", "path", "schema"),
    [
        ("submitJob", "/v1/jobs", "JobRequest"),
        ("submitDistances", "/v1/distances", "DistanceRequest"),
        ("registerFeatureSpec", "/v1/feature-specs", "FeatureSpecBody"),
    ],
)
def test_examples_are_accepted(client: FlaskClient, operation: str, path: str, schema: str) -> None:
    media = _operations()[operation]["requestBody"]["content"]["application/json"]
    assert media["examples"]
    for example in media["examples"].values():
        assert _document_accepts(schema, example["value"])
        answer = post(client, path, example["value"])
        assert answer.status_code in (200, 202), answer.get_data(as_text=True)


# --- Answers outside what generated requests reach are declared too ----------------------------

_POINTS_JOB = {
    "input": {"type": "points", "points": [[0.0], [1.0]]},
    "filtration": {"type": "rips"},
}
_OVER_1024_BYTES = {"data": "[" + "1," * 1024 + "1]", "content_type": "application/json"}

EDGE_ANSWERS = [
    # (operationId, method, path, request arguments, status expected)
    ("submitJob", "POST", "/v1/jobs", {"json": _POINTS_JOB, "headers": {"Accept": NPY}}, 406),
    ("submitJob", "POST", "/v1/jobs", _OVER_1024_BYTES, 413),
    ("registerFeatureSpec", "POST", "/v1/feature-specs", _OVER_1024_BYTES, 413),
    ("submitDistances", "POST", "/v1/distances", _OVER_1024_BYTES, 413),
    (
        "submitJob",
        "POST",
        "/v1/jobs",
        {"json": _POINTS_JOB, "headers": {"Idempotency-Key": " "}},
        400,
    ),
    ("getResult", "GET", "/v1/jobs/x/result", {"headers": {"Accept": NPY}}, 404),
    ("getPlot", "GET", "/v1/jobs/x/plot?width=1", {}, 422),
    ("getHealth", "GET", "/healthz", {}, 200),
    ("getReady", "GET", "/readyz", {}, 503),  # no worker is registered on this queue
]


@pytest.mark.parametrize(("operation", "method", "path", "arguments", "status"), EDGE_ANSWERS)
def test_edge_answers_are_declared(
    redis_url: str,
    operation: str,
    method: str,
    path: str,
    arguments: dict[str, Any],
    status: int,
) -> None:
    """Each answer's status and media type are among the operation's documented responses,
    and its JSON body fits the documented schema."""
    app = app_with(redis_url=redis_url, queue=fresh_queue(), max_wait_s=0, max_body_bytes=1024)
    answer = call(app.test_client(), method, path, **arguments)
    assert answer.status_code == status, answer.get_data(as_text=True)
    declared = _operations()[operation]["responses"][str(status)]
    media = declared["content"][answer.mimetype]
    document = openapi_document()
    root = {**media["schema"], "components": document["components"]}
    assert Draft202012Validator(root).is_valid(answer.get_json())


@pytest.mark.parametrize(
    "key", ["5f0c6d1e-0b7a-4c7e-9d2a-1b3c", '"quoted-key"', "a b", 'in"side', "é", "x" * 256]
)
def test_idempotency_key_pattern_is_what_the_api_takes(client: FlaskClient, key: str) -> None:
    # The header's schema pattern (ECMA-262, here within what Python's re reads alike) against
    # what the route accepts: a key it refuses is a 400 (idempotency-key-invalid).
    submit = _operations()["submitJob"]
    header = next(p for p in submit["parameters"] if p["name"] == "Idempotency-Key")
    documented = re.fullmatch(header["schema"]["pattern"], key) is not None
    answer = post(client, "/v1/jobs", _POINTS_JOB, headers={"Idempotency-Key": key})
    assert answer.status_code == (202 if documented else 400), answer.get_data(as_text=True)
