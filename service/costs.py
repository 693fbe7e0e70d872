"""What a submission would cost (``workers.spec.costs``), and its refusal before it is queued."""

from service.errors import TooCostly
from service.settings import Settings
from service.submissions import Submission
from workers.spec import DistanceRequest, DistanceTask, PersistenceTask
from workers.spec.costs import CostEstimate, distance_cost, judged, persistence_cost

__all__ = ["estimate_of", "items_pointer", "refuse_if_too_costly"]


def items_pointer(request: DistanceRequest) -> str:
    """Where the items of a distance request sit in its body."""
    if request.job_ids is not None:
        return "/job_ids"
    return "/vectors" if request.vectors is not None else "/diagrams"


def estimate_of(
    submission: Submission, settings: Settings, *, uploaded: bool = False, items: str = ""
) -> CostEstimate:
    """The estimate of a job or distance submission against the configured limits;
    ``uploaded``: its data came as a file; ``items``: where a distance request's items are."""
    task = submission.task
    shape = list(submission.array.shape)
    if isinstance(task, DistanceTask):
        cost = distance_cost(submission.input_type, shape, task, submission.array, items)
    elif isinstance(task, PersistenceTask):
        cost = persistence_cost(submission.input_type, shape, task, uploaded)
    else:  # a picture: drawn from a stored result, never sent by a client
        raise TypeError(f"no cost model for {type(task).__name__}")
    return judged(
        cost,
        time_limit_s=settings.job_time_limit_s,
        memory_limit_mb=settings.job_memory_limit_mb,
        time_margin=settings.cost_time_margin,
        memory_margin=settings.cost_memory_margin,
    )


def refuse_if_too_costly(estimate: CostEstimate, settings: Settings) -> None:
    """TooCostly when the estimate says the job cannot fit (and refusing is on)."""
    if estimate.refused and settings.refuse_costly_jobs:
        raise TooCostly(estimate)
