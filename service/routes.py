"""HTTP routes: thin views that parse, validate with the spec models, enqueue or look up, dump."""

import json
import re
from collections.abc import Callable
from typing import IO, Any

from flask import Blueprint, Response, current_app, g, jsonify, request
from flask.blueprints import BlueprintSetupState
from werkzeug.exceptions import NotAcceptable, RequestEntityTooLarge, UnsupportedMediaType

from service.auth import access_of, owner_of
from service.binary import NPY_MEDIA_TYPE, npy_bytes, result_array, wants_npy
from service.cell_tables import decode_cell_table
from service.costs import estimate_of, items_pointer, refuse_if_too_costly
from service.errors import (
    BodyNotJson,
    FeatureSpecNotFound,
    IdempotencyKeyInvalid,
    RequestInvalid,
    ServerBusy,
)
from service.extension import ServiceState
from service.gates import Gates
from service.graphml import decode_graph
from service.pages import job_page, wants_html
from service.pictures import draw, picture_of
from service.queue import Job
from service.quotas import quotas_of
from service.submissions import Submission, distance_submission, job_submission
from service.uploads import decode_array, multipart_parts, stream_size
from workers.spec import DistanceRequest, DistanceTask, FieldError, JobRequest, JobState
from workers.spec.capabilities import Caller, Limits, TenantUsage
from workers.spec.costs import CostEstimate
from workers.spec.features import FeatureSpecBody, feature_spec_answer, spec_id_mismatch
from workers.spec.inputs import LabelledPointsInput
from workers.spec.kinds import InputData, kind_of, request_errors
from workers.spec.plots import PlotQuery
from workers.spec.requests import length_error

__all__ = ["v1", "health"]

v1 = Blueprint("v1", __name__, url_prefix="/v1")
health = Blueprint("health", __name__)

_SPEC_ID = re.compile("[0-9a-f]{64}")

# RFC 7240 preference "wait=N"; at most 6 digits, so an absurd value cannot cost a parse.
_WAIT = re.compile(r"(?:^|[,;\s])wait\s*=\s*\"?(\d{1,6})\"?(?![\d])", re.IGNORECASE)


# Idempotency-Key: a Structured Fields string (quoted) in the IETF httpapi draft; a bare
# token (what most clients send, a UUID) is taken too. Visible ASCII, at most 255 characters.
_IDEMPOTENCY_KEY = re.compile(r'"([!#-~]{1,255})"|([!#-~]{1,255})')


def _state() -> ServiceState:
    state: ServiceState = current_app.extensions["lacuna"]
    return state


_GATES = "lacuna.gates"


@v1.record_once
def _make_gates(setup: BlueprintSetupState) -> None:
    """One set of gates per app, made when the app registers the blueprint."""
    setup.app.extensions[_GATES] = Gates.of(setup.app.extensions["lacuna"].settings)


def _gates() -> Gates:
    gates: Gates = current_app.extensions[_GATES]
    return gates


def _hold_large_parse(size: int) -> None:
    """Take one of the process's large-parse slots for a body of ``size`` bytes over
    ``large_body_bytes``, until the request ends or its wait begins; ServerBusy (503) if none
    is free. Called once the body is read: a 503 sent before would leave the client writing
    into a closed connection."""
    settings = _state().settings
    if g.get("large_parse") or size <= settings.large_body_bytes:
        return
    if not _gates().parses.acquire(blocking=False):
        raise ServerBusy(
            f"this API process is parsing {settings.max_large_parses} large bodies (over "
            f"{settings.large_body_bytes} bytes) already; retry after the Retry-After header"
        )
    g.large_parse = True


def _release_large_parse() -> None:
    if g.pop("large_parse", False):
        _gates().parses.release()


@v1.teardown_request
def _end_large_parse(_: BaseException | None) -> None:
    _release_large_parse()


def _waited(job: Job, seconds: int) -> dict[str, Any] | None:
    """``queue.wait`` within the process's cap on waiters: past it nobody waits, and the
    request answers the job as it stands."""
    waiters = _gates().waiters
    if seconds <= 0 or not waiters.acquire(blocking=False):
        return None
    try:
        return _state().queue.wait(job, seconds)
    finally:
        waiters.release()


_ANY_ROUTE = ("application/json", "application/problem+json")
"""Served by every route: its JSON answers and its problems (RFC 9457)."""

_RULE_VARIABLE = re.compile(r"<(?:[^<>:]+:)?([^<>]+)>")


def _served_types() -> list[str]:
    """What the OpenAPI document says the request's route answers, in any of its responses."""
    rule = request.url_rule
    path = _RULE_VARIABLE.sub(r"{\1}", rule.rule) if rule is not None else ""
    operation = _state().openapi["paths"].get(path, {}).get(request.method.lower(), {})
    served = dict.fromkeys(_ANY_ROUTE)
    for response in operation.get("responses", {}).values():
        served.update(dict.fromkeys(response.get("content", {})))
    return list(served)


def _negotiate() -> None:
    """406 (RFC 9110 section 15.5.7) when the Accept header allows none of what the route
    serves; no Accept header means anything (section 12.5.1)."""
    if not request.accept_mimetypes:
        return
    served = _served_types()
    if request.accept_mimetypes.best_match(served) is None:
        raise NotAcceptable(
            f"this route answers {', '.join(served)}; the Accept header "
            f"{request.headers.get('Accept', '')[:200]!r} allows none of them"
        )


v1.before_request(_negotiate)
health.before_request(_negotiate)


def _json_body(also: str = "") -> Any:
    mimetype = request.mimetype
    if mimetype != "application/json" and not mimetype.endswith("+json"):
        raise UnsupportedMediaType(
            f"send the body as application/json{also} (the Content-Type was "
            f"{mimetype or 'missing'})"
        )
    raw = request.get_data(cache=False)
    limit = request.max_content_length
    if request.content_length is None and limit is not None and len(raw) >= limit:
        # A chunked body is read only up to the limit: reaching it means it was cut short.
        raise RequestEntityTooLarge()
    _hold_large_parse(len(raw))
    try:
        return json.loads(raw)
    except (ValueError, RecursionError) as error:  # RecursionError: absurdly deep nesting
        raise BodyNotJson(f"the body could not be parsed as JSON: {error}") from None


def _requested_wait() -> int:
    """Seconds asked for with ``Prefer: wait=N`` (RFC 7240), capped by the settings."""
    match = _WAIT.search(request.headers.get("Prefer", ""))
    return min(int(match.group(1)), _state().settings.max_wait_s) if match else 0


def _idempotency_key() -> str | None:
    """The request's ``Idempotency-Key``, if it sent one."""
    raw = request.headers.get("Idempotency-Key")
    if raw is None:
        return None
    match = _IDEMPOTENCY_KEY.fullmatch(raw.strip())
    if match is None:
        raise IdempotencyKeyInvalid(
            "Idempotency-Key must be 1 to 255 visible ASCII characters without quotes inside "
            "(a UUID, say), optionally in double quotes"
        )
    return match.group(1) or match.group(2)


def _answer(job: Job, wait: int) -> tuple[Response, int, dict[str, str]]:
    """200 with the result if the job succeeds within ``wait`` seconds, else 202 with its
    status; Location names the job either way."""
    queue = _state().queue
    headers = {"Location": f"/v1/jobs/{job.id}"}
    _release_large_parse()  # the callers hold only the Job: the body is gone by now
    result = _waited(job, wait)
    if result is None and queue.state(job) is JobState.succeeded:
        result = queue.result(job)  # a retried Idempotency-Key naming a job that has ended
    if result is not None:
        return _result_response(result), 200, headers
    return jsonify(queue.status(job).model_dump(mode="json")), 202, headers


def _result_response(result: dict[str, Any]) -> Response:
    """A result as JSON, or as .npy bytes when the client asks for them (Accept)."""
    if not wants_npy(request):
        return jsonify(result)
    array = result_array(result)
    if array is None:
        raise NotAcceptable(
            f"this result has no array to send as {NPY_MEDIA_TYPE} (no feature vectors); "
            "ask for application/json"
        )
    return Response(npy_bytes(array), mimetype=NPY_MEDIA_TYPE)


_DECODERS: dict[str, Callable[[IO[bytes], Limits], InputData]] = {
    "array": decode_array,
    "graphml": decode_graph,
}
"""How the ``data`` part of a multipart request is read, by what the input kind uploads."""


def _job_request() -> tuple[JobRequest, InputData | None, bool, Any]:
    """The request of a job, the arrays of its image, mask or graph input, whether they
    came as an uploaded file (multipart) rather than JSON, and the JSON as sent."""
    state = _state()
    if request.mimetype != "multipart/form-data":
        body = _json_body(", or as multipart/form-data with request and data parts")
        return _json_job_request(body)
    request.max_content_length = state.settings.max_upload_bytes
    body, part = multipart_parts(request)
    _hold_large_parse(stream_size(part))
    job_request = state.feature_specs.resolve(JobRequest.model_validate(body), owner_of(request))
    upload = kind_of(job_request.input.type).upload
    if upload is None:
        raise RequestInvalid(
            [
                FieldError(
                    pointer="/input/type",
                    message=f'input type "{job_request.input.type}" takes no uploaded file; '
                    'upload arrays for "image" and "mask" inputs, GraphML for "graph", CSV or '
                    'GeoJSON for "labelled_points"',
                )
            ]
        )
    if upload == "cell_table":  # the request says how to read the table
        given = job_request.input
        if not isinstance(given, LabelledPointsInput):
            raise TypeError(f"no table upload for {given.type}")
        return job_request, decode_cell_table(part, state.limits, given), True, body
    return job_request, _DECODERS[upload](part, state.limits), True, body


def _json_job_request(body: Any) -> tuple[JobRequest, InputData | None, bool, Any]:
    """A job request sent as JSON, with the arrays of its input."""
    job_request = _state().feature_specs.resolve(JobRequest.model_validate(body), owner_of(request))
    data = kind_of(job_request.input.type).data(job_request.input)
    if isinstance(data, FieldError):
        raise RequestInvalid([data])
    return job_request, data, False, body


@v1.post("/jobs")
def submit_job() -> tuple[Response, int, dict[str, str]]:
    """Queue a job; with ``Prefer: wait=N`` answer its result inline if it succeeds in time.

    The body is JSON, or multipart/form-data with a JSON ``request`` part and a ``data`` file
    part: .npy, TIFF or PNG holding the array of an image or mask input, or GraphML holding a
    graph. An ``Idempotency-Key`` header makes a retried submission answer the first one's
    job."""
    wait = _requested_wait()
    return _answer(_queued_job(), wait)


def _queued_job() -> Job:
    """The request's job, checked and queued. Only the Job comes back: the body, its
    arrays and its submission die here, before any wait (the large-parse slot that bounds
    their memory is given back then)."""
    state = _state()
    job_request, data, uploaded, body = _job_request()
    submission, estimate = _checked_job_submission(job_request, data, uploaded, body)
    if wants_npy(request) and not job_request.features:  # refused before it is queued
        raise NotAcceptable(
            f"a job without features has no vector to send as {NPY_MEDIA_TYPE}; add features "
            "or ask for application/json"
        )
    key = _idempotency_key()
    refuse_if_too_costly(estimate, state.settings)
    return state.queue.submit(submission, owner_of(request), key)


def _checked_job_submission(
    job_request: JobRequest, data: InputData | None, uploaded: bool, body: Any
) -> tuple[Submission, CostEstimate]:
    """A job request checked against the limits (RequestInvalid), as a submission with its
    estimate; ``body`` is the JSON as sent."""
    state = _state()
    errors = request_errors(job_request, state.limits, data, uploaded)
    if errors:
        raise RequestInvalid(errors)
    submission = job_submission(job_request, data, uploaded, body)
    return submission, estimate_of(submission, state.settings, uploaded=uploaded)


@v1.post("/feature-specs")
def register_feature_spec() -> tuple[Response, int, dict[str, str]]:
    """Check a feature spec, keep it, and answer its canonical form and spec_id."""
    spec = FeatureSpecBody.model_validate(_json_body()).root
    errors = [spec_id_mismatch(spec, "/spec_id"), length_error(spec, "", _state().limits)]
    if any(errors):
        raise RequestInvalid([error for error in errors if error is not None])
    spec_id = _state().feature_specs.register(spec, owner_of(request))
    answer = feature_spec_answer(spec)
    return (
        jsonify(answer.model_dump(mode="json")),
        200,
        {"Location": f"/v1/feature-specs/{spec_id}"},
    )


@v1.get("/feature-specs/<spec_id>")
def feature_spec(spec_id: str) -> Response:
    """A registered feature spec, in canonical form."""
    specs = _state().feature_specs
    found = specs.find([spec_id], owner_of(request)) if _SPEC_ID.fullmatch(spec_id) else {}
    if spec_id not in found:
        raise FeatureSpecNotFound(spec_id)
    return jsonify(feature_spec_answer(found[spec_id]).model_dump(mode="json"))


@v1.post("/distances")
def submit_distances() -> tuple[Response, int, dict[str, str]]:
    """Queue a distance matrix; small ones are waited for and answered with 200. An
    ``Idempotency-Key`` header makes a retried submission answer the first one's job."""
    settings = _state().settings
    asked = _WAIT.search(request.headers.get("Prefer", ""))
    job, pairs = _queued_distances()
    if asked is not None:
        wait = min(int(asked.group(1)), settings.max_wait_s)
    else:
        wait = settings.max_wait_s if pairs <= settings.inline_distance_pairs else 0
    return _answer(job, wait)


def _queued_distances() -> tuple[Job, int]:
    """The request's distance matrix, checked and queued, and its count of pairs. As in
    ``_queued_job``, nothing of the body outlives the call."""
    state = _state()
    submission, estimate = _checked_distance_submission(_json_body())
    refuse_if_too_costly(estimate, state.settings)
    job = state.queue.submit(submission, owner_of(request), _idempotency_key())
    count = submission.task.count if isinstance(submission.task, DistanceTask) else 0
    return job, count * (count - 1) // 2


def _checked_distance_submission(body: Any) -> tuple[Submission, CostEstimate]:
    """A distance request's body checked (RequestInvalid), with the results of the jobs it
    names read, as a submission with its estimate."""
    state = _state()
    distance_request = DistanceRequest.model_validate(body)
    errors = distance_request.field_errors(state.limits)
    if errors:
        raise RequestInvalid(errors)
    results = None
    if distance_request.job_ids is not None:
        results = state.queue.results_of(distance_request.job_ids, owner_of(request), "/job_ids")
    submission = distance_submission(distance_request, results, body)
    items = items_pointer(distance_request)
    return submission, estimate_of(submission, state.settings, items=items)


@v1.post("/estimates")
def estimate_job() -> Response:
    """What a job or distance request would cost, and whether it would be refused; nothing
    is queued. The body is that of POST /v1/jobs (JSON with `input`, or multipart) or of
    POST /v1/distances (JSON without `input`)."""
    if request.mimetype == "multipart/form-data":
        _, estimate = _checked_job_submission(*_job_request())
    else:
        body = _json_body(", or as multipart/form-data with request and data parts")
        if isinstance(body, dict) and "input" in body:
            _, estimate = _checked_job_submission(*_json_job_request(body))
        else:
            _, estimate = _checked_distance_submission(body)
    return jsonify(estimate.model_dump(mode="json"))


@v1.get("/jobs/<job_id>")
def job_status(job_id: str) -> Response:
    """State and timestamps of a job; ``Prefer: wait=N`` waits for it to end first.

    ``Accept: text/html`` (a browser) gets the job's page instead."""
    queue = _state().queue
    owner = owner_of(request)
    job = queue.find(job_id, owner)
    if _waited(job, _requested_wait()) is not None:  # it succeeded meanwhile: read it anew
        job = queue.find(job_id, owner)
    status = queue.status(job)
    if wants_html(request):
        result = queue.result(job) if status.status is JobState.succeeded else None
        page = job_page(status, job, queue.payload_of(job), result, queue.request_as_sent(job))
        return Response(page, mimetype="text/html")
    return jsonify(status.model_dump(mode="json"))


@v1.get("/jobs/<job_id>/result")
def job_result(job_id: str) -> Response:
    """Result of a succeeded job (409 while unfinished); ``Prefer: wait=N`` waits first.

    ``Accept: application/x-npy`` asks for the result's array as .npy bytes."""
    queue = _state().queue
    job = queue.find(job_id, owner_of(request))
    return _result_response(_waited(job, _requested_wait()) or queue.result(job))


@v1.get("/jobs/<job_id>/plot")
def job_plot(job_id: str) -> Response:
    """A picture of a succeeded job (diagram, barcode, persistence image or distance matrix,
    SVG or PNG), drawn once and then answered from Redis; If-None-Match gets a 304."""
    query = PlotQuery.model_validate(request.args.to_dict())
    state = _state()
    owner = owner_of(request)
    picture = picture_of(state, state.queue.find(job_id, owner), query, owner)
    # RFC 9110 section 13.1.2: If-None-Match compares weakly; checked after the query was.
    if request.if_none_match.contains_weak(picture.etag):
        answer = Response(status=304)
    else:
        drawn, media_type = draw(state, picture, _gates().waiters)
        answer = Response(drawn, mimetype=media_type)
    answer.set_etag(picture.etag)
    answer.headers["Cache-Control"] = f"private, max-age={picture.max_age}"
    return answer


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
    """What this deployment accepts and runs, and the caller's tenant, quotas and usage."""
    state = _state()
    owner = owner_of(request)
    caller = Caller(
        tenant=owner,
        access=access_of(state.settings),
        quotas=quotas_of(state.queue.redis, state.settings, owner),
        usage=TenantUsage(
            unfinished_jobs=state.queue.unfinished.count(owner),
            feature_specs=state.feature_specs.count(owner),
        ),
    )
    answer = state.capabilities.model_copy(update={"caller": caller})
    return jsonify(answer.model_dump(mode="json"))


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
    """Redis answers and a live worker (one that beats) is on the queue; 503 otherwise."""
    return jsonify({"status": "ready", "workers": _state().queue.ready_workers()})
