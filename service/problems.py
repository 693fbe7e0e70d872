"""The one place where errors become RFC 9457 ``application/problem+json`` answers."""

import logging
from typing import Any, get_args, get_origin

from flask import Flask, Response, current_app, request
from pydantic import BaseModel, RootModel, ValidationError
from pydantic_core import ErrorDetails
from redis.exceptions import RedisError
from werkzeug.exceptions import HTTPException

from service.errors import (
    BodyNotJson,
    FeatureSpecNotFound,
    IdempotencyKeyInvalid,
    IdempotencyKeyReused,
    JobAlreadyEnded,
    JobHasNoResult,
    JobNotFound,
    NotReady,
    QuotaExceeded,
    RateLimited,
    RequestInvalid,
    ServerBusy,
    ServiceError,
    TooCostly,
    Unauthorized,
)
from service.pages import not_found_page, wants_html
from service.request_ids import current_request_id
from workers.spec import DistanceRequest, FieldError, JobRequest, Problem
from workers.spec.features import FeatureSpecBody
from workers.spec.plots import PlotQuery
from workers.spec.problems import problem_of_kind
from workers.spec.tags import discriminated_members, members_by_tag, strip_optional

__all__ = ["register", "pointer_of", "field_errors_of"]

log = logging.getLogger(__name__)

_KINDS: dict[type[ServiceError], str] = {
    BodyNotJson: "malformed-json",
    RequestInvalid: "invalid-request",
    JobNotFound: "job-not-found",
    JobHasNoResult: "job-not-finished",
    JobAlreadyEnded: "job-ended",
    FeatureSpecNotFound: "feature-spec-not-found",
    IdempotencyKeyInvalid: "idempotency-key-invalid",
    IdempotencyKeyReused: "idempotency-key-reused",
    Unauthorized: "unauthorized",
    RateLimited: "rate-limited",
    QuotaExceeded: "quota-exceeded",
    NotReady: "not-ready",
    TooCostly: "too-costly",
    ServerBusy: "server-busy",
}
"""The problem kind of each service error; its status and title are in PROBLEM_KINDS."""

_REQUEST_MODELS: dict[str, type[BaseModel]] = {
    model.__name__: model for model in (JobRequest, DistanceRequest, FeatureSpecBody, PlotQuery)
}
"""Models whose ValidationError is the client's fault (a 422); any other is a bug (a 500)."""


def _respond(problem: Problem, headers: dict[str, str] | None = None) -> Response:
    problem.request_id = current_request_id()
    body = current_app.json.dumps(problem.model_dump(mode="json", exclude_none=True))
    response = Response(body, status=problem.status, mimetype="application/problem+json")
    response.headers.update(headers or {})
    return response


def _child(node: Any, step: int | str) -> tuple[Any, dict[str, Any] | None]:
    """Annotation one step below ``node``, and its tag map if it is a discriminated union."""
    node = strip_optional(node)
    if isinstance(node, type) and issubclass(node, BaseModel) and isinstance(step, str):
        field = node.model_fields.get(step)
        if field is None:
            return None, None
        if field.discriminator:
            return None, members_by_tag(field.annotation)
        return field.annotation, discriminated_members(field.annotation)
    if get_origin(node) is list and isinstance(step, int):
        item = get_args(node)[0]
        return item, discriminated_members(item)
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
    if issubclass(model, RootModel):  # the body is the root value itself, maybe a union
        root = model.model_fields["root"]
        node = root.annotation
        tags = members_by_tag(node) if root.discriminator else discriminated_members(node)
    for step in location:
        if tags is not None:  # this step is a union's tag, not a key of the body
            node = tags.get(str(step))
            tags = discriminated_members(node) if node is not None else None
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


def field_errors_of(error: ValidationError, model: type[BaseModel]) -> list[FieldError]:
    """One FieldError per pydantic error, each with its JSON Pointer."""
    errors = []
    for item in error.errors(include_url=False):
        pointer = pointer_of(tuple(item["loc"]), model)
        if item["type"] in ("union_tag_invalid", "union_tag_not_found"):
            pointer += "/type"  # the culprit is the tag itself
        errors.append(FieldError(pointer=pointer, message=_message(item)))
    return errors


def _browses_job_pages() -> bool:
    """Is this a browser asking for a job's page (which has an HTML 404 of its own)?"""
    return request.endpoint == "v1.job_status" and wants_html(request)


def _challenge(error: Unauthorized) -> str:
    """The ``WWW-Authenticate`` value of a 401 (RFC 6750 section 3): the Bearer scheme, and
    the error code when a key was sent but is not valid."""
    challenge = 'Bearer realm="lacuna"'
    if error.error is not None:
        challenge += f', error="{error.error}"'
    return challenge


def register(app: Flask) -> None:
    """Install the handlers; called once by the app factory."""
    retry_after = {"Retry-After": str(app.extensions["lacuna"].settings.retry_after_s)}

    @app.errorhandler(ServiceError)
    def _service_error(error: ServiceError) -> Response:
        extra: dict[str, Any] = {}
        if isinstance(error, RequestInvalid):
            extra["errors"] = error.errors
        if isinstance(error, JobHasNoResult | JobAlreadyEnded):
            extra["job_status"] = error.state
        if isinstance(error, QuotaExceeded):
            extra.update(quota=error.quota, limit=error.limit)
        if isinstance(error, TooCostly):
            message = "; ".join(error.estimate.reasons)
            extra["errors"] = [FieldError(pointer=error.estimate.driving_field, message=message)]
            extra["estimate"] = error.estimate.model_dump(mode="json")
        problem = problem_of_kind(_KINDS[type(error)], error.detail, **extra)
        if isinstance(error, JobNotFound) and _browses_job_pages():
            page = not_found_page(error.detail, current_request_id())
            return Response(page, status=problem.status, mimetype="text/html")
        if isinstance(error, Unauthorized):  # RFC 9110 11.6.1: a 401 carries a challenge
            return _respond(problem, {"WWW-Authenticate": _challenge(error)})
        if isinstance(error, RateLimited | QuotaExceeded):  # RFC 6585 section 4
            return _respond(problem, {"Retry-After": str(error.retry_after_s)})
        return _respond(problem, retry_after if problem.status == 503 else None)

    @app.errorhandler(ValidationError)
    def _invalid(error: ValidationError) -> Response:
        model = _REQUEST_MODELS.get(error.title)
        if model is None:
            raise error  # a model we build ourselves failed: a bug, not the client's fault
        return _service_error(RequestInvalid(field_errors_of(error, model)))

    @app.errorhandler(HTTPException)
    def _http(error: HTTPException) -> Response:
        status = error.code or 500
        detail = error.description
        if status == 413:
            limit = request.max_content_length
            detail = f"the body is larger than the limit of {limit} bytes"
            length = request.content_length  # None when chunked: then the body limit it is
            if limit is not None and length is not None and length <= limit:  # a form limit
                detail = (
                    f"a multipart text part is larger than {request.max_form_memory_size} bytes, "
                    f"or there are more than {request.max_form_parts} parts; send the request "
                    "part as a file part, and only the request and data parts"
                )
        # get_headers() carries Allow for 405 (RFC 9110 15.5.6); the body type is ours.
        headers = {k: v for k, v in error.get_headers() if k.lower() != "content-type"}
        if status >= 500:
            log.error("HTTP %s on %s %s", status, request.method, request.path)
        problem = Problem(title=error.name, status=status, detail=detail, instance=request.path)
        return _respond(problem, headers)

    @app.errorhandler(RedisError)
    def _redis_down(error: RedisError) -> Response:
        # Unreachable, read-only after a failover, out of memory: the queue cannot take work.
        log.error("Redis failed: %r", error)
        problem = problem_of_kind(
            "queue-unavailable",
            "the job queue (Redis) cannot be reached or refused the request; retry later",
        )
        return _respond(problem, retry_after)

    @app.errorhandler(500)
    def _internal(error: HTTPException) -> Response:
        request_id = current_request_id()
        cause = getattr(error, "original_exception", None) or error
        log.error("unhandled error, request id %s", request_id, exc_info=cause)
        problem = problem_of_kind(
            "internal-error",
            f"an unexpected error occurred; quote request id {request_id}",
            instance=request.path,
        )
        return _respond(problem)
