"""The one place where errors become RFC 9457 ``application/problem+json`` answers."""

import logging
import uuid
from typing import Any

from flask import Flask, Response, current_app, request
from pydantic import ValidationError
from pydantic_core import ErrorDetails
from redis.exceptions import ConnectionError as RedisConnectionError
from redis.exceptions import TimeoutError as RedisTimeoutError
from werkzeug.exceptions import HTTPException

from workers.spec import FieldError, Problem
from workers.spec.problems import PROBLEM_TYPE

__all__ = ["ApiProblem", "register", "invalid_request", "problem_response", "validation_problem"]

log = logging.getLogger(__name__)


class ApiProblem(Exception):
    """Raise from a view to answer with ``problem``; ``headers`` are added to the response."""

    def __init__(self, problem: Problem, headers: dict[str, str] | None = None) -> None:
        super().__init__(problem.detail or problem.title)
        self.problem = problem
        self.headers = headers or {}


def problem_response(problem: Problem, headers: dict[str, str] | None = None) -> Response:
    body = current_app.json.dumps(problem.model_dump(mode="json", exclude_none=True))
    response = Response(body, status=problem.status, mimetype="application/problem+json")
    response.headers.update(headers or {})
    return response


def _escape(token: str) -> str:
    return token.replace("~", "~0").replace("/", "~1")


def pointer_of(location: tuple[int | str, ...], body: Any) -> str:
    """JSON Pointer (RFC 6901) into ``body`` for a pydantic error location.

    Pydantic inserts the tag of a discriminated union into the location
    (``('input', 'points', 'points', 3)`` for ``/input/points/3``); every union here is tagged
    by ``type``, so a step equal to the current object's ``type`` is such a tag and is skipped.
    """
    tokens: list[str] = []
    node = body
    tag_skipped = False  # at most one tag per object, so {"type": "points", "points": ...} works
    for step in location:
        if not tag_skipped and isinstance(node, dict) and node.get("type") == step:
            tag_skipped = True
            continue
        tag_skipped = False
        tokens.append(_escape(str(step)))
        if isinstance(node, dict):
            node = node.get(step)
        elif isinstance(node, list) and isinstance(step, int) and 0 <= step < len(node):
            node = node[step]
        else:
            node = None
    return "".join("/" + t for t in tokens)


def _message(error: ErrorDetails) -> str:
    if error["type"] == "extra_forbidden":
        return "unknown field"
    return error["msg"]


def invalid_request(errors: list[FieldError], detail: str | None = None) -> ApiProblem:
    """A 422 naming every offending field."""
    if detail is None:
        first = errors[0]
        detail = f"{first.pointer or '/'}: {first.message}"
        if len(errors) > 1:
            detail += f" (and {len(errors) - 1} more)"
    return ApiProblem(
        Problem(
            type=PROBLEM_TYPE + "invalid-request",
            title="Invalid request",
            status=422,
            detail=detail,
            errors=errors,
        )
    )


def validation_problem(error: ValidationError, body: Any) -> ApiProblem:
    """Turn pydantic's errors into a 422 with one pointer per error."""
    errors = []
    for item in error.errors(include_url=False):
        location = tuple(item["loc"])
        if item["type"] in ("union_tag_invalid", "union_tag_not_found"):
            location += ("type",)  # the culprit is the tag itself
        errors.append(FieldError(pointer=pointer_of(location, body), message=_message(item)))
    return invalid_request(errors)


def register(app: Flask) -> None:
    """Install the handlers; called once by the app factory."""

    @app.errorhandler(ApiProblem)
    def _api_problem(error: ApiProblem) -> Response:
        return problem_response(error.problem, error.headers)

    @app.errorhandler(HTTPException)
    def _http(error: HTTPException) -> Response:
        status = error.code or 500
        detail = error.description
        if status == 413:
            detail = (
                f"the body is larger than the limit of {app.config['MAX_CONTENT_LENGTH']} bytes"
            )
        headers = (
            {"Allow": error.response.headers["Allow"]} if status == 405 and error.response else {}
        )
        if status >= 500:
            log.error("HTTP %s on %s %s", status, request.method, request.path)
        return problem_response(
            Problem(title=error.name, status=status, detail=detail, instance=request.path),
            headers,
        )

    @app.errorhandler(RedisConnectionError)
    @app.errorhandler(RedisTimeoutError)
    def _redis_down(error: Exception) -> Response:
        log.warning("Redis unreachable: %s", error)
        retry = app.extensions["lacuna"].settings.retry_after_s
        return problem_response(
            Problem(
                type=PROBLEM_TYPE + "queue-unavailable",
                title="Queue unavailable",
                status=503,
                detail="the job queue (Redis) cannot be reached; retry later",
            ),
            {"Retry-After": str(retry)},
        )

    @app.errorhandler(500)
    def _internal(error: Exception) -> Response:
        request_id = uuid.uuid4().hex
        log.exception("unhandled error, request id %s", request_id, exc_info=error)
        return problem_response(
            Problem(
                type=PROBLEM_TYPE + "internal-error",
                title="Internal Server Error",
                status=500,
                detail=f"an unexpected error occurred; quote request id {request_id}",
                instance=request.path,
            )
        )
