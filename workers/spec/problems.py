"""Problem details (RFC 9457), used by HTTP errors and by failed jobs alike."""

from typing import Annotated, Any

from pydantic import BaseModel, ConfigDict, Field

PROBLEM_TYPE = "urn:lacuna:problem:"
"""Prefix of lacuna's problem type URIs; the suffix names the kind (e.g. ``invalid-request``)."""

CANCELLED_TYPE = PROBLEM_TYPE + "cancelled"
"""Problem type stored with a job stopped by ``DELETE /v1/jobs/{id}``."""

PROBLEM_KINDS: dict[str, tuple[int, str]] = {
    # answers of the HTTP API
    "malformed-json": (400, "Body is not JSON"),
    "invalid-request": (422, "Invalid request"),
    "job-not-found": (404, "Job not found"),
    "job-not-finished": (409, "Job has no result"),
    "job-ended": (409, "Job already ended"),
    "feature-spec-not-found": (404, "Feature spec not found"),
    "idempotency-key-invalid": (400, "Invalid Idempotency-Key"),
    "idempotency-key-reused": (422, "Idempotency-Key reused"),
    "unauthorized": (401, "Unauthorized"),
    "rate-limited": (429, "Too many requests"),
    # 429, not 403: a quota frees as jobs end or specs expire, so the request may succeed
    # later (RFC 6585 section 4, with Retry-After), while a 403 says repeating it will not
    # help (RFC 9110 15.5.4).
    "quota-exceeded": (429, "Quota exceeded"),
    "not-ready": (503, "Not ready"),
    "queue-unavailable": (503, "Queue unavailable"),
    "server-busy": (503, "Server busy"),
    "internal-error": (500, "Internal error"),
    # failed jobs (``workers.spec.failures``); invalid-request and internal-error too
    "time-limit": (422, "Time limit exceeded"),
    "cancelled": (409, "Cancelled"),
    "compute-crashed": (500, "Computation crashed"),
    "out-of-memory": (507, "Out of memory"),
    "input-expired": (410, "Input expired"),
    "input-corrupt": (500, "Input corrupt"),
    "payload-invalid": (500, "Job payload invalid"),
    "worker-lost": (500, "Worker lost"),
    # cost of jobs: a configured limit the request is too big for, like time-limit (422)
    "memory-limit": (422, "Memory limit exceeded"),
    "too-costly": (422, "Too costly"),
}
"""Every kind of problem lacuna reports, with its HTTP status and title: the one mapping of
problems to statuses, for API answers and failed jobs alike. Its type URI is
``PROBLEM_TYPE + kind``."""


class FieldError(BaseModel):
    """One thing wrong with one field of the request."""

    pointer: Annotated[str, Field(description="JSON Pointer (RFC 6901) into the request body.")]
    message: str


class Problem(BaseModel):
    """An ``application/problem+json`` object (RFC 9457)."""

    model_config = ConfigDict(extra="allow")

    type: Annotated[str, Field(description="URI reference naming the kind of problem.")] = (
        "about:blank"
    )
    title: str
    status: int
    detail: str | None = None
    instance: str | None = None
    errors: list[FieldError] | None = None
    request_id: Annotated[
        str | None,
        Field(description="The answer's X-Request-Id (API answers): quote it when asking."),
    ] = None


def problem_of_kind(kind: str, detail: str, **extra: Any) -> Problem:
    """The problem of ``kind`` (a key of ``PROBLEM_KINDS``) saying ``detail``."""
    status, title = PROBLEM_KINDS[kind]
    return Problem(type=PROBLEM_TYPE + kind, title=title, status=status, detail=detail, **extra)
