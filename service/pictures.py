"""Pictures of jobs, drawn by a plot job on a worker (matplotlib never runs in the API) and
kept in Redis, so that a picture is drawn once per job and query.

A picture's key and strong ETag both come from one digest of the job, its owner, the
normalised query and ``DRAWING_VERSION``; it is kept for at most the job's remaining result
TTL, which is also the answer's ``max-age``.
"""

import base64
import threading
from dataclasses import dataclass

from service.errors import JobHasNoResult, NotReady, ServerBusy
from service.extension import ServiceState
from service.queue import Job
from service.submissions import plot_submission
from workers.spec import JobState
from workers.spec.arrays import canonical_sha256
from workers.spec.plots import DRAWING_VERSION, PlotQuery, picture_key

__all__ = ["Validators", "draw", "validators_of"]


@dataclass(frozen=True)
class Validators:
    """What an answer with the picture says about it: its ETag and how long to keep it."""

    etag: str
    max_age: int
    digest: str


def validators_of(state: ServiceState, job: Job, query: PlotQuery, owner: str) -> Validators:
    """The ETag and max-age of the picture ``query`` asks of ``job``; JobHasNoResult unless
    the job has succeeded (nothing of its result is read)."""
    job_state = state.queue.state(job)
    if job_state is not JobState.succeeded:
        raise JobHasNoResult(job.id, job_state.value)
    digest = canonical_sha256(
        {
            "job_id": job.id,
            "owner": owner,
            "query": query.model_dump(mode="json"),
            "drawing": DRAWING_VERSION,
        }
    )
    remaining = state.queue.redis.ttl(job.key)  # -1: kept for ever, -2: gone
    ttl = state.settings.result_ttl_s
    max_age = ttl if remaining == -1 else max(min(int(remaining), ttl), 0)
    return Validators(etag=digest[:40], max_age=max_age, digest=digest)


def draw(
    state: ServiceState,
    job: Job,
    query: PlotQuery,
    owner: str,
    waiters: threading.BoundedSemaphore,
) -> tuple[bytes, str]:
    """The picture ``query`` asks of the succeeded ``job``, and its media type: from Redis
    when it was drawn before, else drawn by a plot job, waited for (up to max_wait_s,
    holding one of the process's ``waiters``: ServerBusy when none is free), deleted once
    read or given up on, and the picture kept (up to picture_cache_max_bytes).

    A plot job does not count against the tenant's max_unfinished_jobs: it is the API's own,
    at most one per waiter, and deleted here; counting it would refuse the pictures of a
    tenant whose queue is full."""
    validators = validators_of(state, job, query, owner)
    key = picture_key(job.id, validators.digest)
    redis = state.queue.redis
    media_type, kept = redis.hmget(key, ["media_type", "data"])
    if isinstance(media_type, bytes) and isinstance(kept, bytes):
        return kept, media_type.decode()
    picture, drawn_type = _drawn(state, job, query, owner, waiters)
    if 0 < len(picture) <= state.settings.picture_cache_max_bytes and validators.max_age > 0:
        with redis.pipeline() as pipe:
            pipe.hset(key, mapping={"media_type": drawn_type, "data": picture})
            pipe.expire(key, validators.max_age)
            pipe.execute()
    return picture, drawn_type


def _drawn(
    state: ServiceState,
    job: Job,
    query: PlotQuery,
    owner: str,
    waiters: threading.BoundedSemaphore,
) -> tuple[bytes, str]:
    result = state.queue.result(job)
    submission = plot_submission(query, result, state.queue.payload_of(job), job.id)
    if not waiters.acquire(blocking=False):
        raise ServerBusy(
            f"this API process has {state.settings.max_waiters} requests waiting on jobs "
            "already, and a picture needs one; retry after the Retry-After header"
        )
    try:
        plot = state.queue.submit(submission, owner, counted=False)
        try:
            drawn = state.queue.wait(plot, state.settings.max_wait_s)
            status = state.queue.status(plot)
        finally:
            state.queue.discard(plot)
    finally:
        waiters.release()
    if drawn is None:
        raise NotReady(
            f"the picture was not drawn within {state.settings.max_wait_s} s (plot job "
            f"{status.status.value}); retry later"
        )
    return base64.b64decode(drawn["base64"]), drawn["media_type"]
