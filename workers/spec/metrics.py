"""Where workers record the end of each job in Redis, for the API's ``/metrics`` to read.

Workers may run on other machines than the API, so a job's duration and a failure's reason
are counted where the job ends (``workers.metrics``), in Redis hashes the API reads at scrape
time (``service.metrics``). HINCRBY and HINCRBYFLOAT add on the server, so any number of
workers count into the same fields without a lock. Keys, one set per queue:

- ``durations_key(queue)``, a hash. Field ``<task>|<input>|<outcome>|<bucket>``: how many jobs
  of that kind ended so with a wall time in that bucket, not cumulative (bucket ``b`` of
  ``DURATION_BUCKETS_S`` counts durations in (previous bound, ``b``], ``+Inf`` the rest; the
  reader adds them up into Prometheus's cumulative buckets). Field
  ``<task>|<input>|<outcome>|sum``: their total seconds.
- ``failures_key(queue)``, a hash: problem kind (``invalid-request``, ``time-limit``,
  ``memory-limit``, ...) -> failed jobs.
- ``cancelled_key(queue)``, a sorted set of jobs cancelled while running, scored by when RQ
  forgets them (the failure TTL): RQ files them as failed, and this tells them apart.
"""

from collections.abc import Mapping
from typing import Any, Final, get_args

from workers.spec.jobs import JobState, StoredType
from workers.spec.problems import PROBLEM_TYPE

__all__ = [
    "CANCELLED_REASON",
    "DURATION_BUCKETS_S",
    "FAILURE_CALLBACK",
    "MEMORY_LIMIT_REASON",
    "OTHER",
    "SUCCESS_CALLBACK",
    "bucket_of",
    "cancelled_key",
    "durations_key",
    "duration_field",
    "failure_reason",
    "failures_key",
    "job_kind",
    "outcome_of",
]

DURATION_BUCKETS_S: Final = (
    0.01,
    0.025,
    0.05,
    0.1,
    0.25,
    0.5,
    1.0,
    2.5,
    5.0,
    10.0,
    30.0,
    60.0,
    120.0,
    300.0,
    600.0,
)
"""Upper bounds (seconds) of the job duration histogram: from a small inline job (a few ms)
to the default time limit (300 s) and beyond."""

SUCCESS_CALLBACK: Final = "workers.metrics.job_succeeded"
FAILURE_CALLBACK: Final = "workers.metrics.job_failed"
"""RQ callbacks the service sets on every job, by dotted name (like ``JOB_FUNCTION``): they
count the job's end on the worker that ran it."""

MEMORY_LIMIT_REASON: Final = "memory-limit"
"""The problem kind of a job whose compute process was killed at its memory limit; it is
counted among failures and as a counter of its own."""

CANCELLED_REASON: Final = "cancelled"
"""The problem kind of a job stopped by ``DELETE /v1/jobs/{id}``."""

OTHER: Final = "other"
"""Label value of anything outside the known values (a payload this version cannot read)."""

_TASKS: Final = ("persistence", "distances", "plot")
_INPUTS: Final = tuple(get_args(StoredType))
_REASON_CHARACTERS = frozenset("abcdefghijklmnopqrstuvwxyz0123456789-")


def durations_key(queue: str) -> str:
    return f"lacuna:metrics:{queue}:durations"


def failures_key(queue: str) -> str:
    return f"lacuna:metrics:{queue}:failures"


def cancelled_key(queue: str) -> str:
    return f"lacuna:metrics:{queue}:cancelled"


def job_kind(raw_payload: object) -> tuple[str, str]:
    """(task type, stored input type) of a queued payload, each one of a few known values
    (``OTHER`` otherwise), so labels stay few whatever the payload holds."""
    task = input_type = OTHER
    if isinstance(raw_payload, Mapping):
        found_task = _get(raw_payload, "task", "type")
        found_input = _get(raw_payload, "input", "type")
        task = found_task if isinstance(found_task, str) and found_task in _TASKS else OTHER
        if isinstance(found_input, str) and found_input in _INPUTS:
            input_type = found_input
    return task, input_type


def _get(payload: Mapping[str, Any], part: str, name: str) -> object:
    inner = payload.get(part)
    return inner.get(name) if isinstance(inner, Mapping) else None


def failure_reason(problem: object) -> str:
    """The problem kind of a failed job's stored problem (``job.meta['problem']``).

    A failure without one is what the API reports as ``worker-lost`` (the job's process
    ended without saying why), so it counts as that.
    """
    kind = "worker-lost"
    if isinstance(problem, Mapping) and isinstance(problem.get("type"), str):
        kind = problem["type"].removeprefix(PROBLEM_TYPE)
    if not kind or len(kind) > 40 or not set(kind) <= _REASON_CHARACTERS:
        return OTHER
    return kind


def outcome_of(reason: str | None) -> JobState:
    """How a job that ended ended: succeeded (no reason), cancelled or failed."""
    if reason is None:
        return JobState.succeeded
    return JobState.cancelled if reason == CANCELLED_REASON else JobState.failed


def bucket_of(seconds: float) -> str:
    """The histogram bucket (its upper bound as a string, or ``+Inf``) ``seconds`` falls in."""
    for bound in DURATION_BUCKETS_S:
        if seconds <= bound:
            return repr(bound)
    return "+Inf"


def duration_field(task: str, input_type: str, outcome: JobState, part: str) -> str:
    """The field of ``durations_key`` for one kind and outcome; ``part`` a bucket or ``sum``."""
    return f"{task}|{input_type}|{outcome.value}|{part}"
