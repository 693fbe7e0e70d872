"""Jobs whose worker died under them: found by their lapsed claims, queued again or failed.

A running job has a claim in RQ's StartedJobRegistry of its queue: its execution's entry,
scored by the moment the claim lapses (RQ's own convention for that registry). The worker
running it renews the claim with every heartbeat (``workers.liveness``) to
``now + dead_after_s``, so a claim whose score has passed belongs to a worker that has been
silent for ``dead_after_s``: killed, crashed, or cut off from Redis. Such a job is queued
again (``lost_job_retries`` times, counted in ``job.meta["lost_attempts"]``), then failed
with the worker-lost problem (``workers.spec.failures.worker_died``); a job asked to cancel
is failed as cancelled instead of being run again.

Who reaps: every worker's heartbeat thread, after a beat, takes the queue's reaper lock
(``SET NX`` with a lifetime of one heartbeat interval, never released), so across all
workers the registry is read at most once per interval, by one worker. The API never
reaps: it stays stateless. RQ's own cleanup of that registry (every 10 minutes, failing a
lapsed job without saying why) is left out of the workers' maintenance
(``workers.resilient``), so there is one rule.

Each job is reaped in one MULTI/EXEC watched on the job's hash: if its worker stores a
result meanwhile, the transaction fails and the job is left alone. A worker that comes back
after its claim was reaped finds the claim gone and drops its result (the job is another
worker's now).
"""

import logging
from dataclasses import dataclass

from redis import Redis
from redis.exceptions import WatchError
from rq import Queue
from rq.defaults import RQ_KEY_PREFIX
from rq.exceptions import NoSuchJobError
from rq.executions import WORKER_EXECUTIONS_KEY_TEMPLATE
from rq.job import Job, JobStatus
from rq.job_lifecycle import record_job_failure
from rq.utils import as_text, current_timestamp, now, parse_composite_key

from workers.spec import failures
from workers.spec.jobs import cancel_key, input_key

__all__ = ["LOST_ATTEMPTS", "Reaped", "reap_claim", "reap_lapsed", "reaper_lock_key"]

log = logging.getLogger(__name__)

LOST_ATTEMPTS = "lost_attempts"
"""``job.meta`` key: how many attempts of the job ended with its worker dead."""

_ORPHAN_STATES = (JobStatus.STARTED, JobStatus.QUEUED)  # QUEUED: died between claim and start


@dataclass(frozen=True)
class Reaped:
    """What became of one job whose worker died: ``requeued``, ``failed`` or ``cancelled``."""

    job_id: str
    outcome: str
    attempts: int


def reaper_lock_key(queue: Queue) -> str:
    """Redis key of the lock one worker holds for an interval while it reaps ``queue``."""
    return f"lacuna:reaper:{queue.name}"


def reap_lapsed(queue: Queue, retries: int, why: str) -> list[Reaped]:
    """Reap every job of ``queue`` whose claim has lapsed (``why``: how that is described)."""
    moment = current_timestamp()
    lapsed = queue.connection.zrangebyscore(queue.started_job_registry.key, 0, moment)
    reaped = []
    for entry in lapsed:
        assert isinstance(entry, bytes | str)  # members only, no scores asked for
        outcome = reap_claim(queue, as_text(entry), retries, why, lapsed_before=moment)
        if outcome is not None:
            reaped.append(outcome)
    return reaped


def reap_claim(
    queue: Queue, claim: str, retries: int, why: str, lapsed_before: float | None = None
) -> Reaped | None:
    """Requeue or fail the job of ``claim`` (``<job id>:<execution id>`` in ``queue``'s
    StartedJobRegistry), whose worker is dead. With ``lapsed_before``, only if the claim's
    score is still below it (not renewed meanwhile). None when there was nothing to do."""
    connection: Redis = queue.connection
    registry_key = queue.started_job_registry.key
    job_id, _ = parse_composite_key(claim)
    with connection.pipeline() as pipe:
        pipe.watch(Job.key_for(job_id))  # type: ignore[no-untyped-call]
        score = connection.zscore(registry_key, claim)
        if score is None or (lapsed_before is not None and score > lapsed_before):
            return None  # ended or renewed meanwhile
        try:
            job = Job.fetch(job_id, connection=connection, serializer=queue.serializer)
        except NoSuchJobError:
            connection.zrem(registry_key, claim)
            return None
        if job.get_status(refresh=False) not in _ORPHAN_STATES:
            connection.zrem(registry_key, claim)  # a leftover of a job that ended
            return None
        attempts = int(job.meta.get(LOST_ATTEMPTS, 0)) + 1
        cancelled = bool(connection.exists(cancel_key(job_id)))
        dead_worker = job.worker_name or "unknown"
        pipe.multi()
        pipe.zrem(registry_key, claim)
        pipe.delete(f"{RQ_KEY_PREFIX}:execution:{claim}")
        pipe.srem(WORKER_EXECUTIONS_KEY_TEMPLATE.format(dead_worker), claim)
        pipe.lrem(queue.intermediate_queue_key, 0, job_id)
        job.meta[LOST_ATTEMPTS] = attempts
        job.meta.pop("progress", None)
        if not cancelled and attempts <= retries:
            outcome = "requeued"
            job.started_at = job.ended_at = None
            queue.enqueue_job(job, pipeline=pipe)  # saves the job with its meta
        else:
            outcome = "cancelled" if cancelled else "failed"
            problem = (
                failures.cancelled()
                if cancelled
                else failures.worker_died(dead_worker, attempts, why)
            )
            job.meta["problem"] = problem.model_dump(mode="json", exclude_none=True)
            pipe.hset(job.key, "meta", queue.serializer.dumps(job.meta))
            job.ended_at = now()
            record_job_failure(job, f"worker {dead_worker} lost: {why}", pipe)
            pipe.delete(input_key(job_id))
        try:
            pipe.execute()
        except WatchError:
            return None  # its worker wrote to it meanwhile: look again next round
    log.warning(
        "job %s %s: its worker %s died (%s; attempt %d)",
        job_id,
        outcome,
        dead_worker,
        why,
        attempts,
    )
    return Reaped(job_id=job_id, outcome=outcome, attempts=attempts)
