"""The API in process: apps on the test's Redis, requests whose answers are never a 500, and
readers of what they answer (RFC 9457 problems, job states, diagram pairs).

The apps are in testing mode, so an unhandled exception fails the test instead of hiding in a
500; ``call`` checks the "no 500" rule on every answer as well.
"""

import json
import math
import uuid
from typing import Any

import numpy as np
from flask import Flask
from flask.testing import FlaskClient
from werkzeug.test import TestResponse

from service.app import create_app
from service.settings import Settings
from tests.support.waiting import wait_until

PROBLEM_JSON = "application/problem+json"
JOBS = "/v1/jobs"
WAIT = {"Prefer": "wait=30"}
"""Asks the API to answer a job inline once it ends (RFC 7240), for up to 30 s."""


def fresh_queue() -> str:
    """A queue name of the test's own, so no other test's jobs or workers cross its path."""
    return f"test-{uuid.uuid4().hex[:12]}"


def app_with(**overrides: Any) -> Flask:
    """An app in testing mode on ``Settings(**overrides)``, open access unless they say."""
    app = create_app(Settings(**{"auth": "open", **overrides}))
    app.testing = True
    return app


def call(client: FlaskClient, method: str, path: str, **kwargs: Any) -> TestResponse:
    response = client.open(path, method=method, **kwargs)
    assert response.status_code != 500, response.get_data(as_text=True)
    return response


def post(client: FlaskClient, path: str, body: Any, **kwargs: Any) -> TestResponse:
    """POST ``body`` as JSON to ``path`` through ``call``."""
    # json.dumps, not the client's json=: it writes NaN/Infinity as raw tokens like many
    # clients do, while the app's own provider would refuse to encode them.
    return call(
        client, "POST", path, data=json.dumps(body), content_type="application/json", **kwargs
    )


def problem_of(response: TestResponse, status: int) -> dict[str, Any]:
    """The RFC 9457 body of ``response``, after checking the envelope every problem shares."""
    assert response.status_code == status, response.get_data(as_text=True)
    assert response.mimetype == PROBLEM_JSON
    problem: dict[str, Any] = json.loads(response.get_data(as_text=True))
    assert problem["status"] == status
    for member in ("type", "title", "detail"):
        assert isinstance(problem[member], str) and problem[member].strip(), member
    return problem


def pointers_of(problem: dict[str, Any]) -> list[str]:
    return [error["pointer"] for error in problem["errors"]]


def said(problem: dict[str, Any]) -> str:
    """Everything the client is told in words, lower-cased for keyword checks."""
    messages = [error["message"] for error in problem.get("errors") or []]
    return " ".join([problem["detail"], *messages]).lower()


def refused(response: TestResponse, pointers: list[str], hint: str) -> dict[str, Any]:
    """The 422 problem after checking its pointers, that the detail names the first (the
    whole body, pointer "", is written "/"), and that the words carry ``hint``."""
    problem = problem_of(response, 422)
    assert pointers_of(problem) == pointers
    assert problem["detail"].startswith((pointers[0] or "/") + ":"), problem["detail"]
    assert hint.lower() in said(problem), said(problem)
    return problem


def stored_jobs(client: FlaskClient) -> int:
    """Jobs RQ holds in the test database (each test starts on a flushed one)."""
    redis = client.application.extensions["lacuna"].queue.redis
    return sum(1 for _ in redis.scan_iter("rq:job:*"))


def status_once(
    client: FlaskClient, job_id: str, states: set[str], timeout: float = 60
) -> dict[str, Any]:
    """The job's status as soon as it is in one of ``states``; fails the test if it is not
    within ``timeout`` seconds (a bound on a hung test, not a claim about speed)."""
    last: dict[str, Any] = {}

    def reached() -> bool:
        last.clear()
        last.update(call(client, "GET", f"{JOBS}/{job_id}").get_json())
        return last["status"] in states

    wait_until(reached, timeout, lambda: f"job {job_id} in {sorted(states)}; last seen {last}")
    return last


def pairs_array(pairs: list[list[float | None]]) -> np.ndarray:
    """Pairs as JSON carries them (null death = never dies) as (k, 2) with inf deaths."""
    return np.array(
        [[b, math.inf if d is None else d] for b, d in pairs], dtype=np.float64
    ).reshape(-1, 2)


def result_of(client: FlaskClient, body: dict[str, Any], path: str = JOBS) -> dict[str, Any]:
    """POST ``body`` asking to wait for the answer (RFC 7240), then the 200 answer's JSON: the
    job succeeded within the wait (a worker must be running)."""
    response = post(client, path, body, headers=WAIT)
    assert response.status_code == 200, response.get_data(as_text=True)
    result: dict[str, Any] = response.get_json()
    return result
