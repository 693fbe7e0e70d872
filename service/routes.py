"""HTTP routes: thin views that parse, validate with the spec models, enqueue or look up, dump."""

import json
import re
from typing import Any

from flask import Blueprint, Response, current_app, jsonify, request
from werkzeug.exceptions import UnsupportedMediaType

from service.auth import owner_of
from service.errors import BodyNotJson, RequestInvalid
from service.extension import ServiceState
from workers.spec import JobRequest, JobState

__all__ = ["v1", "health"]

v1 = Blueprint("v1", __name__, url_prefix="/v1")
health = Blueprint("health", __name__)

# RFC 7240 preference "wait=N"; at most 6 digits, so an absurd value cannot cost a parse.
_WAIT = re.compile(r"(?:^|[,;\s])wait\s*=\s*\"?(\d{1,6})\"?(?![\d])", re.IGNORECASE)


def _state() -> ServiceState:
    state: ServiceState = current_app.extensions["lacuna"]
    return state


def _json_body() -> Any:
    mimetype = request.mimetype
    if mimetype != "application/json" and not mimetype.endswith("+json"):
        raise UnsupportedMediaType(
            f"send the body as application/json (got {mimetype or 'no Content-Type'})"
        )
    raw = request.get_data(cache=False)
    try:
        return json.loads(raw)
    except (ValueError, RecursionError) as error:  # RecursionError: absurdly deep nesting
        raise BodyNotJson(f"the body could not be parsed as JSON: {error}") from None


def _requested_wait() -> int:
    """Seconds asked for with ``Prefer: wait=N`` (RFC 7240), capped by the settings."""
    match = _WAIT.search(request.headers.get("Prefer", ""))
    return min(int(match.group(1)), _state().settings.max_wait_s) if match else 0


@v1.post("/jobs")
def submit_job() -> tuple[Response, int, dict[str, str]]:
    """Queue a job; with ``Prefer: wait=N`` answer its result inline if it succeeds in time."""
    state = _state()
    wait = _requested_wait()
    job_request = JobRequest.model_validate(_json_body())
    errors = job_request.field_errors(state.limits)
    if errors:
        raise RequestInvalid(errors)
    job = state.queue.submit(job_request, owner_of(request))
    headers = {"Location": f"/v1/jobs/{job.id}"}
    result = state.queue.wait(job, wait)
    if result is not None:
        return jsonify(result), 200, headers
    return jsonify(state.queue.status(job).model_dump(mode="json")), 202, headers


@v1.get("/jobs/<job_id>")
def job_status(job_id: str) -> Response:
    """State and timestamps of a job; ``Prefer: wait=N`` waits for it to end first."""
    queue = _state().queue
    job = queue.find(job_id, owner_of(request))
    queue.wait(job, _requested_wait())
    return jsonify(queue.status(job).model_dump(mode="json"))


@v1.get("/jobs/<job_id>/result")
def job_result(job_id: str) -> Response:
    """Result of a succeeded job (409 while unfinished); ``Prefer: wait=N`` waits first."""
    queue = _state().queue
    job = queue.find(job_id, owner_of(request))
    return jsonify(queue.wait(job, _requested_wait()) or queue.result(job))


@v1.delete("/jobs/<job_id>")
def cancel_job(job_id: str) -> tuple[Response, int]:
    """Cancel a job: 200 once cancelled, 202 while a running job is being stopped."""
    queue = _state().queue
    job = queue.find(job_id, owner_of(request))
    queue.cancel(job)
    status = queue.status(job)
    return jsonify(
        status.model_dump(mode="json")
    ), 202 if status.status is JobState.running else 200


@v1.get("/capabilities")
def capabilities() -> Response:
    """What this deployment accepts and runs."""
    return jsonify(_state().capabilities.model_dump(mode="json"))


@v1.get("/openapi.json")
def openapi_document() -> Response:
    """The OpenAPI document of this API."""
    return jsonify(_state().openapi)


@health.get("/healthz")
def healthz() -> Response:
    """The process is up."""
    return jsonify({"status": "ok"})


@health.get("/readyz")
def readyz() -> Response:
    """Redis answers and at least one worker is registered on the queue (503 otherwise)."""
    return jsonify({"status": "ready", "workers": _state().queue.ready_workers()})
