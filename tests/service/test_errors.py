"""Every error the API answers: status, application/problem+json, exact JSON Pointers, a detail
a client can act on, and never a 500.

All requests go through ``call`` (tests/support/api.py), so the "no 500" rule is checked on
each answer.
"""

import json
import socket
import subprocess
import uuid
from collections.abc import Iterator
from typing import Any

import pytest
from flask.testing import FlaskClient
from redis import Redis
from rq import Queue
from rq.serializers import JSONSerializer
from werkzeug.test import TestResponse

from service.settings import Settings
from tests.support.api import JOBS, app_with, call, fresh_queue, pointers_of, post, problem_of, said
from tests.support.bodies import rips_job
from tests.support.ports import free_port
from tests.support.waiting import finishes

# --- helpers ---------------------------------------------------------------------------------


def job_body(points: list[Any] | None = None, **filtration: Any) -> dict[str, Any]:
    """A valid request (the unit square's corners), changed only where a test says so."""
    if points is None:
        points = [[0.0, 0.0], [1.0, 0.0], [0.0, 1.0], [1.0, 1.0]]
    return rips_job(points, units="um", **({"max_dim": 1, "max_edge": None} | filtration))


def post_json(client: FlaskClient, body: Any, **kwargs: Any) -> TestResponse:
    return post(client, JOBS, body, **kwargs)


# --- body and media type ---------------------------------------------------------------------


@pytest.mark.parametrize(
    "raw",
    [b"{nope", b'{"input": {"type": "points"', b"", b"\xff\xfe\x00"],
    ids=["garbage", "truncated", "empty", "not-utf8"],
)
def test_body_that_is_not_json_is_400(client: FlaskClient, raw: bytes) -> None:
    response = call(client, "POST", JOBS, data=raw, content_type="application/json")
    problem = problem_of(response, 400)
    assert "json" in problem["detail"].lower()


def test_text_plain_body_is_415(client: FlaskClient) -> None:
    response = call(client, "POST", JOBS, data=json.dumps(job_body()), content_type="text/plain")
    problem = problem_of(response, 415)
    # Names both what was sent and what to send instead.
    assert "application/json" in problem["detail"]
    assert "text/plain" in problem["detail"]


def test_missing_content_type_is_415(client: FlaskClient) -> None:
    response = call(client, "POST", JOBS, data=json.dumps(job_body()).encode())
    problem = problem_of(response, 415)
    assert "application/json" in problem["detail"]


# --- 422: one case per kind of invalid field ------------------------------------------------


def _with(body: dict[str, Any], section: str, **changes: Any) -> dict[str, Any]:
    body[section].update(changes)
    return body


INVALID = [
    pytest.param(
        _with(job_body(), "input", type="surface"),
        ["/input/type"],
        "points",
        id="unknown-input-type",
    ),
    pytest.param(
        _with(job_body(), "filtration", type="cech"),
        ["/filtration/type"],
        "rips",
        id="unknown-filtration-type",
    ),
    pytest.param(
        job_body([[0, 0], [1, 1], [2]]), ["/input/points/2"], "coordinates", id="ragged-short-row"
    ),
    pytest.param(
        job_body([[0, 0], [1, 1, 1], [2, 2]]),
        ["/input/points/1"],
        "coordinates",
        id="ragged-long-row",
    ),
    pytest.param(
        job_body([[0, 0], [1, 1], [2, 2], [3, "a"]]), ["/input/points/3/1"], "number", id="string"
    ),
    pytest.param(job_body([[0, 0], [True, 1]]), ["/input/points/1/0"], "number", id="boolean"),
    pytest.param(job_body([[0, 0], [None, 1]]), ["/input/points/1/0"], "number", id="null"),
    pytest.param(job_body([[0, 0], [1, float("nan")]]), ["/input/points/1/1"], "finite", id="nan"),
    pytest.param(
        job_body([[0, 0], [1, 1], [float("inf"), 2]]),
        ["/input/points/2/0"],
        "finite",
        id="infinity",
    ),
    pytest.param(
        job_body([[float("-inf"), 0]]), ["/input/points/0/0"], "finite", id="minus-infinity"
    ),
    pytest.param(
        job_body([[0, 0], [1e300, 1]]), ["/input/points/1/0"], "1e+100", id="overflowing-magnitude"
    ),
    pytest.param(job_body([]), ["/input/points"], "at least 1", id="no-points"),
    pytest.param(job_body([[0.0] * 17]), ["/input/points/0"], "16", id="17-coordinates"),
    pytest.param(job_body([[0, 0], []]), ["/input/points/1"], "at least 1", id="0-coordinates"),
    pytest.param(job_body(max_dim=-1), ["/filtration/max_dim"], "0", id="max-dim-minus-1"),
    pytest.param(job_body(max_dim=3), ["/filtration/max_dim"], "2", id="max-dim-3"),
    pytest.param(job_body(max_edge=-0.5), ["/filtration/max_edge"], "0", id="negative-max-edge"),
    pytest.param(
        job_body(subsample={"method": "maxmin", "size": 0, "seed": 1}),
        ["/filtration/subsample/size"],
        "1",
        id="subsample-size-0",
    ),
    pytest.param(
        job_body(subsample={"method": "random", "size": 5, "seed": 1}),  # the body has 4 points
        ["/filtration/subsample/size"],
        "4 points",
        id="subsample-larger-than-n",
    ),
    pytest.param(
        job_body(colour="red"), ["/filtration/colour"], "unknown field", id="extra-filtration"
    ),
    pytest.param(
        _with(job_body(), "input", colour="red"),
        ["/input/colour"],
        "unknown field",
        id="extra-input",
    ),
    pytest.param(
        {**job_body(), "colour": "red"}, ["/colour"], "unknown field", id="extra-top-level"
    ),
]


@pytest.mark.parametrize(("body", "pointers", "hint"), INVALID)
def test_invalid_field_is_422_with_its_pointer(
    client: FlaskClient, settings: Settings, body: Any, pointers: list[str], hint: str
) -> None:
    response = post_json(client, body)
    problem = problem_of(response, 422)
    assert pointers_of(problem) == pointers
    # The detail alone must locate the first culprit, for clients that only show detail.
    assert pointers[0] in problem["detail"]
    assert hint.lower() in said(problem)
    assert all(error["message"].strip() for error in problem["errors"])
    # Refused before it reaches the queue.
    assert settings.redis_url is not None
    queue = Queue(
        settings.queue, connection=Redis.from_url(settings.redis_url), serializer=JSONSerializer
    )
    assert queue.count == 0


def test_several_invalid_fields_are_all_reported(client: FlaskClient) -> None:
    body = job_body([[0, "a"], [1, float("nan")]], max_dim=7, colour="red")
    problem = problem_of(post_json(client, body), 422)
    assert sorted(pointers_of(problem)) == sorted(
        ["/input/points/0/1", "/input/points/1/1", "/filtration/max_dim", "/filtration/colour"]
    )
    assert "more" in problem["detail"]  # says the first is not the only one


# --- configured limits -----------------------------------------------------------------------


@pytest.fixture
def limited_client(redis_url: str) -> FlaskClient:
    return app_with(
        redis_url=redis_url, queue=fresh_queue(), max_points=10, max_body_bytes=2048
    ).test_client()


def _points(n: int) -> list[list[float]]:
    return [[float(i), float(i * i % 7)] for i in range(n)]


def test_more_points_than_the_limit_without_subsample_is_422(limited_client: FlaskClient) -> None:
    problem = problem_of(post_json(limited_client, job_body(_points(11))), 422)
    assert pointers_of(problem) == ["/input/points"]
    words = said(problem)
    assert "subsample" in words  # tells the client how to get under the limit
    assert "10" in words and "11" in words


def test_points_at_the_limit_are_accepted(limited_client: FlaskClient) -> None:
    assert post_json(limited_client, job_body(_points(10))).status_code == 202


@pytest.mark.parametrize("method", ["maxmin", "random"])
@pytest.mark.parametrize("size", [1, 10])
def test_more_points_than_the_limit_with_subsample_is_accepted(
    limited_client: FlaskClient, method: str, size: int
) -> None:
    body = job_body(_points(11), subsample={"method": method, "size": size, "seed": 3})
    response = post_json(limited_client, body)
    assert response.status_code == 202, response.get_data(as_text=True)
    assert response.headers["Location"].startswith("/v1/jobs/")


def test_subsample_above_the_limit_is_422(limited_client: FlaskClient) -> None:
    body = job_body(_points(11), subsample={"method": "maxmin", "size": 11, "seed": 3})
    problem = problem_of(post_json(limited_client, body), 422)
    assert pointers_of(problem) == ["/filtration/subsample/size"]
    assert "10" in said(problem)


def test_body_above_the_byte_limit_is_413(limited_client: FlaskClient) -> None:
    body = job_body(_points(10) * 40, subsample={"method": "maxmin", "size": 10, "seed": 0})
    raw = json.dumps(body)
    assert len(raw) > 2048
    response = call(limited_client, "POST", JOBS, data=raw, content_type="application/json")
    problem = problem_of(response, 413)
    assert "2048" in problem["detail"]  # the client learns the limit it hit


def test_body_under_the_byte_limit_is_not_refused(limited_client: FlaskClient) -> None:
    # Same app as the 413 case, so that 413 comes from the size and not from the app.
    raw = json.dumps(job_body())
    assert len(raw) < 2048
    response = call(limited_client, "POST", JOBS, data=raw, content_type="application/json")
    assert response.status_code == 202


# --- job lookups -----------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("method", "template"),
    [("GET", "/v1/jobs/{}"), ("GET", "/v1/jobs/{}/result"), ("DELETE", "/v1/jobs/{}")],
    ids=["status", "result", "cancel"],
)
@pytest.mark.parametrize(
    "job_id", [str(uuid.uuid4()), "not-a-uuid"], ids=["unknown-uuid", "malformed"]
)
def test_unknown_job_is_404(client: FlaskClient, method: str, template: str, job_id: str) -> None:
    problem = problem_of(call(client, method, template.format(job_id)), 404)
    assert job_id in problem["detail"]


def test_result_of_an_unfinished_job_is_409(client: FlaskClient) -> None:
    # The default fixtures run no worker, so the job stays queued.
    submitted = post_json(client, job_body())
    assert submitted.status_code == 202
    location = submitted.headers["Location"]
    problem = problem_of(call(client, "GET", location + "/result"), 409)
    assert "queued" in problem["detail"]
    assert problem["job_status"] == "queued"
    # The job itself still exists: 409 is about the result, not the job.
    assert call(client, "GET", location).status_code == 200


# --- Redis unreachable -----------------------------------------------------------------------


@pytest.fixture
def down_client() -> FlaskClient:
    return app_with(
        redis_url=f"redis://127.0.0.1:{free_port()}/0", redis_timeout_s=0.5, queue=fresh_queue()
    ).test_client()


def _assert_unavailable(response: TestResponse) -> None:
    problem = problem_of(response, 503)
    assert int(response.headers["Retry-After"]) >= 1
    assert "redis" in problem["detail"].lower()


@pytest.mark.parametrize(
    ("method", "path", "body"),
    [
        ("POST", JOBS, job_body()),
        ("GET", f"/v1/jobs/{uuid.uuid4()}", None),
        ("GET", f"/v1/jobs/{uuid.uuid4()}/result", None),
        ("DELETE", f"/v1/jobs/{uuid.uuid4()}", None),
    ],
    ids=["submit", "status", "result", "cancel"],
)
def test_redis_down_is_503_with_retry_after(
    down_client: FlaskClient, method: str, path: str, body: Any
) -> None:
    # Nothing listens on the port, so the connection is refused at once: a 503 to retry.
    data = None if body is None else json.dumps(body)
    response = call(down_client, method, path, data=data, content_type="application/json")
    _assert_unavailable(response)


@pytest.fixture
def silent_redis() -> Iterator[int]:
    """A port that accepts connections (the kernel completes them into the listen backlog)
    and never answers: a hung Redis, as the app sees it."""
    with socket.socket() as listener:
        listener.bind(("127.0.0.1", 0))
        listener.listen(16)
        yield int(listener.getsockname()[1])


@pytest.mark.parametrize(
    ("method", "path", "body"),
    [("POST", JOBS, job_body()), ("GET", f"/v1/jobs/{uuid.uuid4()}", None)],
    ids=["submit", "status"],
)
def test_redis_that_never_answers_is_503_not_a_hang(
    silent_redis: int, method: str, path: str, body: Any
) -> None:
    # Without a socket timeout the request would wait for ever; with redis_timeout_s it gives
    # up and says so (the 60 s deadline bounds a hang, it is not the claim).
    client = app_with(
        redis_url=f"redis://127.0.0.1:{silent_redis}/0", redis_timeout_s=0.5, queue=fresh_queue()
    ).test_client()
    data = None if body is None else json.dumps(body)
    response = finishes(
        lambda: call(client, method, path, data=data, content_type="application/json"),
        60,
        f"{method} {path} against a Redis that never answers",
    )
    _assert_unavailable(response)


def test_redis_down_keeps_the_app_serving(down_client: FlaskClient) -> None:
    _assert_unavailable(post_json(down_client, job_body()))
    health = call(down_client, "GET", "/healthz")
    assert health.status_code == 200
    assert health.get_json() == {"status": "ok"}
    ready = call(down_client, "GET", "/readyz")
    problem = problem_of(ready, 503)
    assert int(ready.headers["Retry-After"]) >= 1
    assert "redis" in problem["detail"].lower()
    # Still the same clean answer afterwards: no broken state left behind.
    _assert_unavailable(call(down_client, "GET", f"/v1/jobs/{uuid.uuid4()}"))
    assert call(down_client, "GET", "/healthz").status_code == 200


# --- readiness -------------------------------------------------------------------------------


def test_readyz_is_503_without_a_worker(client: FlaskClient) -> None:
    response = call(client, "GET", "/readyz")
    problem = problem_of(response, 503)
    assert "worker" in problem["detail"]
    assert int(response.headers["Retry-After"]) >= 1


def test_readyz_is_200_with_a_worker(client: FlaskClient, worker: subprocess.Popen[bytes]) -> None:
    response = call(client, "GET", "/readyz")
    assert response.status_code == 200
    assert response.get_json()["workers"] >= 1


# --- regressions: 405 carries Allow; a stray "type" member does not shift pointers ---


def test_wrong_method_is_405_with_allow(client: FlaskClient) -> None:
    response = call(client, "PUT", JOBS)
    problem_of(response, 405)
    assert "POST" in response.headers.get("Allow", "")


def test_stray_type_member_does_not_shift_pointers(client: FlaskClient) -> None:
    body = {"type": "input", **job_body([[0, "a"]])}
    problem = problem_of(post_json(client, body), 422)
    assert sorted(pointers_of(problem)) == ["/input/points/0/1", "/type"]


def test_pointer_escapes_slash_and_tilde(client: FlaskClient) -> None:
    # RFC 6901 section 3: "~" is written "~0" and "/" is written "~1" inside a token.
    body = job_body()
    body["filtration"]["a/b~c"] = 1
    problem = problem_of(post_json(client, body), 422)
    assert pointers_of(problem) == ["/filtration/a~1b~0c"]


@pytest.mark.parametrize(
    "prefer", ["wait=" + "9" * 5000, "wait=-1", "wait=abc", "respond-async, wait=0", "wait"]
)
def test_odd_prefer_headers_are_ignored_not_fatal(client: FlaskClient, prefer: str) -> None:
    # RFC 7240: a preference the server cannot honour is ignored; it is never an error.
    response = call(client, "POST", JOBS, json=job_body(), headers={"Prefer": prefer})
    assert response.status_code == 202


def test_absurdly_nested_body_is_400(client: FlaskClient) -> None:
    response = call(client, "POST", JOBS, data="[" * 100_000, content_type="application/json")
    problem_of(response, 400)
