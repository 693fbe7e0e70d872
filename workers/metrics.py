"""What a worker records when a job ends: its duration by kind and, when it failed, why.

``job_succeeded`` and ``job_failed`` are RQ callbacks that ``service.queue`` sets by dotted
name when it enqueues, so they run on whichever worker ran the job, on any machine, and add
to the counts in Redis that the API's ``/metrics`` reads (``workers.spec.metrics`` says
where). Each also writes the job's closing log line, with its job and request ids.

A job reaped while its worker was cut off is not counted by that worker (its outcome is
dropped; the reaper counts what it fails, ``count_end``). RQ fails a job whose success
callback raises, so a Redis error here is logged and dropped: a lost count never costs a
result.
"""

import logging
import time
from datetime import UTC, datetime
from typing import Any

from redis import Redis
from redis.client import Pipeline
from redis.exceptions import RedisError
from rq.defaults import DEFAULT_FAILURE_TTL
from rq.job import Job

from workers.claim import current as current_claim
from workers.spec.jobs import JobState
from workers.spec.metrics import (
    bucket_of,
    cancelled_key,
    duration_field,
    durations_key,
    failure_reason,
    failures_key,
    job_kind,
    outcome_of,
)

__all__ = ["count_end", "job_failed", "job_succeeded"]

log = logging.getLogger(__name__)


def job_succeeded(job: Job, connection: Redis, result: Any, *args: Any, **kwargs: Any) -> None:
    """RQ success callback: count the job's duration."""
    _record(job, connection, None)


def job_failed(job: Job, connection: Redis, *exc_info: Any, **kwargs: Any) -> None:
    """RQ failure callback: count the job's duration and its problem kind."""
    _record(job, connection, failure_reason(job.meta.get("problem")))


def _seconds_since(started: datetime | None) -> float:
    if started is None:  # failed before RQ started it
        return 0.0
    if started.tzinfo is None:
        started = started.replace(tzinfo=UTC)
    return max(0.0, (datetime.now(UTC) - started).total_seconds())


def count_end(pipe: Pipeline, job: Job, reason: str | None) -> tuple[float, JobState]:
    """Add the end of ``job`` (failed for ``reason``, or succeeded when None) to the counts,
    on ``pipe``; returns its duration and outcome. The reaper counts the jobs it fails with
    this too, inside its own transaction."""
    seconds = _seconds_since(job.started_at)
    task, input_type = job_kind(job.args[0] if job.args else None)
    outcome = outcome_of(reason)
    queue = job.origin
    durations = durations_key(queue)
    pipe.hincrby(durations, duration_field(task, input_type, outcome, bucket_of(seconds)))
    pipe.hincrbyfloat(durations, duration_field(task, input_type, outcome, "sum"), seconds)
    if reason is not None:
        pipe.hincrby(failures_key(queue), reason, 1)
    if outcome is JobState.cancelled:
        now = time.time()
        pipe.zremrangebyscore(cancelled_key(queue), "-inf", now)  # bounded unscraped
        pipe.zadd(cancelled_key(queue), {job.id: now + (job.failure_ttl or DEFAULT_FAILURE_TTL)})
    return seconds, outcome


def _record(job: Job, connection: Redis, reason: str | None) -> None:
    task, input_type = job_kind(job.args[0] if job.args else None)
    claim = current_claim()
    try:
        if claim is not None and not claim.held():
            # Reaped while this worker was cut off: its outcome is dropped, and the reaper or
            # the next attempt counts the job.
            log.warning("job %s: not counted here, its claim is gone", job.id)
            return
        with connection.pipeline(transaction=True) as pipe:
            seconds, outcome = count_end(pipe, job, reason)
            pipe.execute()
    except RedisError as error:
        seconds, outcome = _seconds_since(job.started_at), outcome_of(reason)
        log.warning("the end of job %s was not counted: %r", job.id, error)
    log.info(
        "job %s %s after %.3f s%s",
        job.id,
        outcome.value,
        seconds,
        f" ({reason})" if outcome is JobState.failed else "",
        extra={
            "job_id": job.id,
            "request_id": job.meta.get("request_id"),
            "fields": {
                "task": task,
                "input": input_type,
                "outcome": outcome.value,
                "reason": reason,
                "duration_s": round(seconds, 6),
            },
        },
    )
