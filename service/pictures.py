"""Pictures of jobs, drawn by a plot job on a worker: matplotlib never runs in the API."""

import base64

from service.errors import NotReady
from service.extension import ServiceState
from service.queue import Job
from service.submissions import plot_submission
from workers.spec.plots import PlotQuery

__all__ = ["draw"]


def draw(state: ServiceState, job: Job, query: PlotQuery, owner: str) -> tuple[bytes, str]:
    """The picture ``query`` asks of the succeeded ``job``, and its media type; the plot job
    is waited for (up to max_wait_s) and deleted once read."""
    result = state.queue.result(job)
    submission = plot_submission(query, result, state.queue.payload_of(job), job.id)
    plot = state.queue.submit(submission, owner)
    drawn = state.queue.wait(plot, state.settings.max_wait_s)
    status = state.queue.status(plot)
    state.queue.discard(plot)
    if drawn is None:
        raise NotReady(
            f"the picture was not drawn within {state.settings.max_wait_s} s (plot job "
            f"{status.status.value}); retry later"
        )
    return base64.b64decode(drawn["base64"]), drawn["media_type"]
