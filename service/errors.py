"""What can go wrong in the HTTP layer, as exceptions; ``service.problems`` maps them to HTTP.

Tree::

    ServiceError
    ├── BodyNotJson          the body does not parse as JSON
    ├── RequestInvalid       fields are wrong (carries one FieldError per culprit)
    ├── JobNotFound          no such job for this owner
    ├── JobHasNoResult       the job exists but has not succeeded
    ├── JobAlreadyEnded      cancelling a job that has ended
    ├── FeatureSpecNotFound  no feature spec registered under that id
    ├── IdempotencyKeyInvalid  the Idempotency-Key header is not a usable key
    ├── IdempotencyKeyReused   the key was used with another request body
    ├── Unauthorized         no API key, or one that is unknown or revoked (keys mode)
    ├── RateLimited          the tenant's request rate is used up for now
    ├── QuotaExceeded        the tenant holds as many jobs or feature specs as it may
    ├── TooCostly            the job's estimated cost is beyond the limits
    ├── NotReady             no Redis or no worker
    └── ServerBusy           this process is parsing as many large bodies, or waiting on as
                             many jobs (for pictures), as it may
"""

from workers.spec import FieldError
from workers.spec.costs import CostEstimate

__all__ = [
    "BodyNotJson",
    "FeatureSpecNotFound",
    "IdempotencyKeyInvalid",
    "IdempotencyKeyReused",
    "JobAlreadyEnded",
    "JobHasNoResult",
    "JobNotFound",
    "NotReady",
    "QuotaExceeded",
    "RateLimited",
    "RequestInvalid",
    "ServerBusy",
    "ServiceError",
    "Unauthorized",
    "TooCostly",
]


class ServiceError(Exception):
    """Base of the errors the service raises on purpose; ``detail`` is shown to the client."""

    def __init__(self, detail: str) -> None:
        super().__init__(detail)
        self.detail = detail


class BodyNotJson(ServiceError):
    pass


class RequestInvalid(ServiceError):
    def __init__(self, errors: list[FieldError]) -> None:
        first = errors[0]
        detail = f"{first.pointer or '/'}: {first.message}"
        if len(errors) > 1:
            detail += f" (and {len(errors) - 1} more)"
        super().__init__(detail)
        self.errors = errors


class JobNotFound(ServiceError):
    def __init__(self, job_id: str) -> None:
        super().__init__(f"no job {job_id!r} (unknown, or its result has expired)")


class JobHasNoResult(ServiceError):
    def __init__(self, job_id: str, state: str) -> None:
        super().__init__(f"job {job_id} is {state}; a result exists once it has succeeded")
        self.state = state


class JobAlreadyEnded(ServiceError):
    def __init__(self, job_id: str, state: str) -> None:
        super().__init__(f"job {job_id} is {state} and cannot be cancelled")
        self.state = state


class FeatureSpecNotFound(ServiceError):
    def __init__(self, spec_id: str) -> None:
        super().__init__(f"no feature spec is registered under {spec_id!r}")


class IdempotencyKeyInvalid(ServiceError):
    pass


class IdempotencyKeyReused(ServiceError):
    def __init__(self, key: str, job_id: str) -> None:
        super().__init__(
            f"Idempotency-Key {key!r} was used for job {job_id} with a different request; "
            "send a new key for a new request"
        )
        self.job_id = job_id


class Unauthorized(ServiceError):
    """``error`` is the RFC 6750 section 3.1 error code (``invalid_token``), None when the
    request carried no key at all (section 3: then no error code is sent)."""

    def __init__(self, detail: str, error: str | None = None) -> None:
        super().__init__(detail)
        self.error = error


class RateLimited(ServiceError):
    def __init__(self, tenant: str, rate: float, burst: int, retry_after_s: int) -> None:
        super().__init__(
            f"tenant {tenant!r} sent more than its {burst} requests at once or {rate:g} per "
            f"second; retry after {retry_after_s} s"
        )
        self.retry_after_s = retry_after_s


class QuotaExceeded(ServiceError):
    """``quota`` names the quota (a field of the tenant's quotas in /v1/capabilities)."""

    def __init__(self, tenant: str, quota: str, limit: int, retry_after_s: int, why: str) -> None:
        super().__init__(f"tenant {tenant!r} is at its quota {quota} = {limit}: {why}")
        self.quota = quota
        self.limit = limit
        self.retry_after_s = retry_after_s


class NotReady(ServiceError):
    pass


class TooCostly(ServiceError):
    def __init__(self, estimate: CostEstimate) -> None:
        super().__init__(
            "; ".join(estimate.reasons) + f"; {estimate.driving_field} drives the cost "
            "(POST /v1/estimates prices a request without queueing it)"
        )
        self.estimate = estimate


class ServerBusy(ServiceError):
    pass
