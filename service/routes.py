"""HTTP routes: thin views that parse, validate with the spec models, enqueue or look up, dump."""

import json
import re
from importlib.metadata import version
from typing import Any, get_args

from flask import Blueprint, Response, current_app, jsonify, request
from pydantic import ValidationError
from redis.exceptions import RedisError
from werkzeug.exceptions import UnsupportedMediaType

from service.auth import owner_of
from service.extension import Lacuna
from service.problems import (
    ApiProblem,
    invalid_request,
    problem_response,
    validation_problem,
)
from workers.spec import (
    SCHEMA_VERSION,
    Capabilities,
    Filtration,
    Input,
    JobRequest,
    JobState,
    Problem,
)
from workers.spec.problems import PROBLEM_TYPE
from workers.spec.results import PROVENANCE_PACKAGES

__all__ = ["v1", "health"]

v1 = Blueprint("v1", __name__, url_prefix="/v1")
health = Blueprint("health", __name__)

_WAIT = re.compile(r"(?:^|[,;\s])wait\s*=\s*\"?(\d+)\"?", re.IGNORECASE)


def _lacuna() -> Lacuna:
    extension: Lacuna = current_app.extensions["lacuna"]
    return extension


def _json_body() -> Any:
    mimetype = request.mimetype
    if mimetype != "application/json" and not mimetype.endswith("+json"):
        raise UnsupportedMediaType(
            f"send the body as application/json (got {mimetype or 'no Content-Type'})"
        )
    raw = request.get_data(cache=False)
    try:
        return json.loads(raw)
    except (ValueError, UnicodeDecodeError) as error:
        raise ApiProblem(
            Problem(
                type=PROBLEM_TYPE + "malformed-json",
                title="Body is not JSON",
                status=400,
                detail=f"the body could not be parsed as JSON: {error}",
            )
        ) from None


def _requested_wait() -> int:
    """Seconds asked for with ``Prefer: wait=N`` (RFC 7240), capped by the settings."""
    match = _WAIT.search(request.headers.get("Prefer", ""))
    if not match:
        return 0
    return min(int(match.group(1)), _lacuna().settings.max_wait_s)


def _tags(union: Any) -> list[str]:
    members = get_args(get_args(union)[0]) or (get_args(union)[0],)
    return [get_args(m.model_fields["type"].annotation)[0] for m in members]


@v1.post("/jobs")
def submit_job() -> tuple[Response, int, dict[str, str]]:
    """Queue a job; with ``Prefer: wait=N`` answer its result inline if it ends in time."""
    lacuna = _lacuna()
    body = _json_body()
    try:
        job_request = JobRequest.model_validate(body)
    except ValidationError as error:
        raise validation_problem(error, JobRequest) from None
    errors = job_request.field_errors(lacuna.limits)
    if errors:
        raise invalid_request(errors)
    queue = lacuna.queue
    job = queue.submit(job_request, owner_of(request))
    headers = {"Location": f"/v1/jobs/{job.id}"}
    wait = _requested_wait()
    if wait:
        queue.wait(job, wait)
        if queue.state(job) is JobState.succeeded:
            return jsonify(queue.result(job)), 200, headers
    return jsonify(queue.status(job).model_dump(mode="json")), 202, headers


@v1.get("/jobs/<job_id>")
def job_status(job_id: str) -> Response:
    """State and timestamps of a job."""
    queue = _lacuna().queue
    return jsonify(queue.status(queue.find(job_id, owner_of(request))).model_dump(mode="json"))


@v1.get("/jobs/<job_id>/result")
def job_result(job_id: str) -> Response:
    """Result of a succeeded job (409 while it is unfinished)."""
    queue = _lacuna().queue
    return jsonify(queue.result(queue.find(job_id, owner_of(request))))


@v1.delete("/jobs/<job_id>")
def cancel_job(job_id: str) -> tuple[Response, int]:
    """Cancel a job: 200 once cancelled, 202 while a running job is being stopped."""
    queue = _lacuna().queue
    job = queue.find(job_id, owner_of(request))
    queue.cancel(job)
    status = queue.status(job)
    return jsonify(
        status.model_dump(mode="json")
    ), 202 if status.status is JobState.running else 200


@v1.get("/capabilities")
def capabilities() -> Response:
    """What this deployment accepts and runs."""
    lacuna = _lacuna()
    answer = Capabilities(
        schema_version=SCHEMA_VERSION,
        input_types=_tags(Input),
        filtrations=_tags(Filtration),
        value_convention="edge_length",
        limits=lacuna.limits,
        versions={name: version(name) for name in PROVENANCE_PACKAGES},
    )
    return jsonify(answer.model_dump(mode="json"))


@v1.get("/openapi.json")
def openapi_document() -> Response:
    """The OpenAPI document of this API."""
    return jsonify(_lacuna().openapi)


@health.get("/healthz")
def healthz() -> Response:
    """The process is up."""
    return jsonify({"status": "ok"})


@health.get("/readyz")
def readyz() -> Response:
    """Redis answers and at least one worker is registered on the queue."""
    lacuna = _lacuna()
    try:
        lacuna.queue.redis.ping()
        workers = lacuna.queue.worker_count()
    except RedisError as error:
        detail = f"Redis unreachable ({type(error).__name__})"
    else:
        if workers >= 1:
            return jsonify({"status": "ready", "workers": workers})
        detail = "no worker is registered on the queue"
    return problem_response(
        Problem(type=PROBLEM_TYPE + "not-ready", title="Not ready", status=503, detail=detail),
        {"Retry-After": str(lacuna.settings.retry_after_s)},
    )
