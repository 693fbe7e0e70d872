"""Pictures of jobs, drawn by a plot job on a worker: matplotlib never runs in the API."""

import base64
import threading

from service.errors import NotReady, ServerBusy
from service.extension import ServiceState
from service.queue import Job
from service.submissions import plot_submission
from workers.spec.plots import PlotQuery

__all__ = ["draw"]


def draw(
    state: ServiceState,
    job: Job,
    query: PlotQuery,
    owner: str,
    waiters: threading.BoundedSemaphore,
) -> tuple[bytes, str]:
    """The picture ``query`` asks of the succeeded ``job``, and its media type; the plot job
    is waited for (up to max_wait_s, holding one of the process's ``waiters``: ServerBusy
    when none is free) and deleted once read or given up on.

    A plot job does not count against the tenant's max_unfinished_jobs: it is the API's own,
    at most one per waiter, and deleted here; counting it would refuse the pictures of a
    tenant whose queue is full."""
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
