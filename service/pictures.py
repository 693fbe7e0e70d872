"""Pictures of jobs, drawn by a plot job on a worker (matplotlib never runs in the API) and
kept by ``PictureCache``, so that a picture is drawn once per job and query.

A picture's cache key and strong ETag both come from one digest of the job, its owner, the
normalised query, ``DRAWING_VERSION`` and lacuna's installed version (so an upgrade never
answers a picture of the old drawing); it is kept for at most the job's remaining result
TTL, which is also the answer's ``max-age``.
"""

import base64
import functools
import threading
from dataclasses import dataclass
from importlib.metadata import version

from service.errors import NotReady, ServerBusy
from service.extension import ServiceState
from service.picture_cache import PictureCache
from service.queue import Job
from service.submissions import Submission, plot_submission
from workers.spec.arrays import canonical_sha256
from workers.spec.plots import DRAWING_VERSION, PlotQuery

__all__ = ["Picture", "draw", "picture_of"]


@dataclass(frozen=True)
class Picture:
    """A picture a request asks of a job: the plot job that draws it, its ETag and how long
    an answer with it may be kept."""

    job_id: str
    owner: str
    submission: Submission
    digest: str
    etag: str
    max_age: int


@functools.cache
def _lacuna_version() -> str:
    return version("lacuna")


def picture_of(state: ServiceState, job: Job, query: PlotQuery, owner: str) -> Picture:
    """The picture ``query`` asks of ``job``, checked against the job's result: JobHasNoResult
    unless the job has succeeded, RequestInvalid (pointing into the query) when the job has
    nothing of that kind; nothing is drawn."""
    result = state.queue.result(job)
    submission = plot_submission(query, result, state.queue.payload_of(job), job.id)
    digest = canonical_sha256(
        {
            "job_id": job.id,
            "owner": owner,
            "query": query.model_dump(mode="json"),
            "drawing": DRAWING_VERSION,
            "lacuna": _lacuna_version(),
        }
    )
    remaining = state.queue.remaining_ttl_s(job)
    ttl = state.settings.result_ttl_s
    return Picture(
        job_id=job.id,
        owner=owner,
        submission=submission,
        digest=digest,
        etag=digest[:40],
        max_age=ttl if remaining is None else min(remaining, ttl),
    )


def draw(
    state: ServiceState, picture: Picture, waiters: threading.BoundedSemaphore
) -> tuple[bytes, str]:
    """The bytes of ``picture`` and their media type: kept ones when it was drawn before,
    else drawn by a plot job, waited for (up to max_wait_s, holding one of the process's
    ``waiters``: ServerBusy when none is free), deleted once read or given up on, and the
    picture kept within the cache's bounds (picture_cache_max_bytes each,
    picture_cache_bytes_per_job per job).

    A plot job does not count against the tenant's max_unfinished_jobs: it is the API's own,
    at most one per waiter, and deleted here; counting it would refuse the pictures of a
    tenant whose queue is full."""
    settings = state.settings
    cache = PictureCache(
        state.queue.redis,
        max_bytes=settings.picture_cache_max_bytes,
        bytes_per_job=settings.picture_cache_bytes_per_job,
    )
    kept = cache.get(picture.job_id, picture.digest)
    if kept is not None:
        return kept
    drawn, media_type = _drawn(state, picture, waiters)
    cache.put(picture.job_id, picture.digest, drawn, media_type, picture.max_age)
    return drawn, media_type


def _drawn(
    state: ServiceState, picture: Picture, waiters: threading.BoundedSemaphore
) -> tuple[bytes, str]:
    if not waiters.acquire(blocking=False):
        raise ServerBusy(
            f"this API process has {state.settings.max_waiters} requests waiting on jobs "
            "already, and a picture needs one; retry after the Retry-After header"
        )
    try:
        plot = state.queue.submit(picture.submission, picture.owner, counted=False)
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
