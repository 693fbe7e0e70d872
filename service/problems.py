"""The one place where errors become RFC 9457 ``application/problem+json`` answers."""

import logging
import uuid
from types import UnionType
from typing import Annotated, Any, Union, get_args, get_origin

from flask import Flask, Response, current_app, request
from pydantic import BaseModel, ValidationError
from pydantic.fields import FieldInfo
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


def _members(annotation: Any) -> dict[str, Any]:
    """Tag -> model for a union tagged by ``type`` (a single model counts as a union of one)."""
    members = [m for m in (get_args(annotation) or (annotation,)) if m is not type(None)]
    return {get_args(m.model_fields["type"].annotation)[0]: m for m in members}


def _discriminated(annotation: Any) -> dict[str, Any] | None:
    """The tag map if ``annotation`` is a discriminated union (possibly Optional), else None."""
    if get_origin(annotation) is Annotated:
        base, *metadata = get_args(annotation)
        if any(isinstance(m, FieldInfo) and m.discriminator for m in metadata):
            return _members(base)
        return _discriminated(base)
    if get_origin(annotation) in (Union, UnionType):
        inner = [a for a in get_args(annotation) if a is not type(None)]
        return _discriminated(inner[0]) if len(inner) == 1 else None
    return None


def _plain(annotation: Any) -> Any:
    """Strip Annotated and Optional."""
    while True:
        if get_origin(annotation) is Annotated:
            annotation = get_args(annotation)[0]
        elif get_origin(annotation) in (Union, UnionType):
            inner = [a for a in get_args(annotation) if a is not type(None)]
            if len(inner) != 1:
                return annotation
            annotation = inner[0]
        else:
            return annotation


def _child(node: Any, step: int | str) -> tuple[Any, dict[str, Any] | None]:
    """Annotation one step below ``node``, and its tag map if it is a discriminated union."""
    node = _plain(node)
    if isinstance(node, type) and issubclass(node, BaseModel) and isinstance(step, str):
        field = node.model_fields.get(step)
        if field is None:
            return None, None
        if field.discriminator:
            return None, _members(field.annotation)
        return field.annotation, _discriminated(field.annotation)
    if get_origin(node) is list and isinstance(step, int):
        item = get_args(node)[0]
        return item, _discriminated(item)
    return None, None


def pointer_of(location: tuple[int | str, ...], model: type[BaseModel]) -> str:
    """JSON Pointer (RFC 6901) into the body for a pydantic error location.

    Pydantic inserts the tag of a discriminated union into the location
    (``('input', 'points', 'points', 3)`` for ``/input/points/3``). Walking the model along
    the location tells exactly where such a tag sits, so only those steps are dropped.
    """
    tokens: list[str] = []
    node: Any = model
    tags: dict[str, Any] | None = None
    for step in location:
        if tags is not None:
            node, tags = tags.get(str(step)), None
            continue
        tokens.append(str(step).replace("~", "~0").replace("/", "~1"))
        node, tags = _child(node, step)
    return "".join("/" + t for t in tokens)


_BOUNDS = {
    "greater_than": ("gt", "greater than"),
    "greater_than_equal": ("ge", "greater than or equal to"),
    "less_than": ("lt", "less than"),
    "less_than_equal": ("le", "less than or equal to"),
}


def _message(error: ErrorDetails) -> str:
    if error["type"] == "extra_forbidden":
        return "unknown field"
    if error["type"] in _BOUNDS:  # pydantic spells 1e100 out in a hundred digits
        key, words = _BOUNDS[error["type"]]
        bound = error.get("ctx", {}).get(key)
        if isinstance(bound, int | float):
            return f"Input should be {words} {bound:g}"
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


def validation_problem(error: ValidationError, model: type[BaseModel]) -> ApiProblem:
    """Turn pydantic's errors into a 422 with one pointer per error."""
    errors = []
    for item in error.errors(include_url=False):
        pointer = pointer_of(tuple(item["loc"]), model)
        if item["type"] in ("union_tag_invalid", "union_tag_not_found"):
            pointer += "/type"  # the culprit is the tag itself
        errors.append(FieldError(pointer=pointer, message=_message(item)))
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
        # get_headers() carries Allow for 405 (RFC 9110 15.5.6); the body type is ours.
        headers = {k: v for k, v in error.get_headers() if k.lower() != "content-type"}
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
