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

Each job is reaped in one MULTI/EXEC watched on the job's hash and the registry: if its
worker renews its claim or stores a result meanwhile, the transaction fails and the job is
left alone. A worker that comes back
after its claim was reaped finds the claim gone and drops its result (the job is another
worker's now).

A worker can also die before it claims a job: RQ moves the job's id from the queue to the
queue's intermediate queue as a worker takes it (BLMOVE) and the worker claims it within
milliseconds. An id there without a claim on two passes ``dead_after_s`` apart is stranded
(``reap_stranded``): requeued or failed like a lapsed claim, as one more lost attempt, and
taken off the intermediate queue in the same transaction; an id whose job ended or is gone
is only taken off. RQ's own cleanup of the intermediate queue (failing the job after a
minute) is left out of the workers' maintenance too.
"""

import logging
from dataclasses import dataclass

from redis import Redis
from redis.client import Pipeline
from redis.exceptions import WatchError
from rq import Queue
from rq.defaults import RQ_KEY_PREFIX
from rq.exceptions import NoSuchJobError
from rq.executions import WORKER_EXECUTIONS_KEY_TEMPLATE
from rq.job import Job, JobStatus
from rq.job_lifecycle import record_job_failure
from rq.utils import as_text, current_timestamp, now, parse_composite_key

from workers.metrics import count_end
from workers.spec import failures
from workers.spec.jobs import cancel_key, input_key
from workers.spec.metrics import failure_reason

__all__ = ["Reaped", "reap_claim", "reap_lapsed", "reap_stranded", "reaper_lock_key"]

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
        # The registry too: a worker renewing its claim before storing aborts this reap.
        pipe.watch(Job.key_for(job_id), registry_key)  # type: ignore[no-untyped-call]
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
        cancelled = bool(connection.exists(cancel_key(job_id)))
        dead_worker = job.worker_name or "unknown"
        pipe.multi()
        pipe.zrem(registry_key, claim)
        pipe.delete(f"{RQ_KEY_PREFIX}:execution:{claim}")
        pipe.srem(WORKER_EXECUTIONS_KEY_TEMPLATE.format(dead_worker), claim)
        pipe.lrem(queue.intermediate_queue_key, 0, job_id)
        outcome, attempts = _requeue_or_fail(pipe, queue, job, retries, cancelled, dead_worker, why)
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


def _requeue_or_fail(
    pipe: Pipeline,
    queue: Queue,
    job: Job,
    retries: int,
    cancelled: bool,
    dead_worker: str,
    why: str,
) -> tuple[str, int]:
    """Queue ``job`` again, or fail it worker-lost (or cancelled), on ``pipe`` in MULTI:
    counted as one more lost attempt. Returns the outcome and the attempts so far."""
    attempts = int(job.meta.get(LOST_ATTEMPTS, 0)) + 1
    job.meta[LOST_ATTEMPTS] = attempts
    job.meta.pop("progress", None)
    if not cancelled and attempts <= retries:
        job.started_at = job.ended_at = None
        queue.enqueue_job(job, pipeline=pipe)  # saves the job with its meta
        return "requeued", attempts
    problem = (
        failures.cancelled() if cancelled else failures.worker_died(dead_worker, attempts, why)
    )
    job.meta["problem"] = problem.model_dump(mode="json", exclude_none=True)
    pipe.hset(job.key, "meta", queue.serializer.dumps(job.meta))
    job.ended_at = now()
    record_job_failure(job, f"worker {dead_worker} lost: {why}", pipe)
    count_end(pipe, job, failure_reason(job.meta["problem"]))  # as the failure callback would
    pipe.delete(input_key(job.id))
    return ("cancelled" if cancelled else "failed"), attempts


def unclaimed_key(queue: Queue) -> str:
    """Redis key of the hash: job id in ``queue``'s intermediate queue without a claim ->
    when a reaper pass first saw it so (Redis's clock, seconds)."""
    return f"lacuna:reaper:{queue.name}:unclaimed"


def _claimed_ids(connection: Redis, queue: Queue) -> set[str]:
    claimed = set()
    for entry in connection.zrange(queue.started_job_registry.key, 0, -1):
        assert isinstance(entry, bytes | str)  # members only, no scores asked for
        claimed.add(parse_composite_key(as_text(entry))[0])
    return claimed


def _redis_seconds(connection: Redis) -> float:
    seconds, microseconds = connection.time()
    return float(seconds) + microseconds / 1e6


def reap_stranded(queue: Queue, retries: int, grace_s: float) -> list[Reaped]:
    """Requeue or fail the jobs stranded in ``queue``'s intermediate queue, and drop the ids
    there whose job ended or is gone.

    RQ moves a job id from the queue to the intermediate queue as a worker takes it (BLMOVE),
    and the worker claims the job (StartedJobRegistry) within milliseconds; a worker that dies
    in between leaves the id where no worker looks. An id without a claim on two passes at
    least ``grace_s`` apart (the first sighting kept in ``unclaimed_key``, which lapses when
    the passes stop) is stranded. A worker listening on several queues leaves the id of a job
    it ran there (RQ removes it only for a single queue): such leftovers are dropped too."""
    connection: Redis = queue.connection
    ids = dict.fromkeys(as_text(i) for i in connection.lrange(queue.intermediate_queue_key, 0, -1))
    claimed = _claimed_ids(connection, queue)
    unclaimed = [job_id for job_id in ids if job_id not in claimed]
    key = unclaimed_key(queue)
    moment = _redis_seconds(connection)
    seen = {as_text(k): float(v) for k, v in connection.hgetall(key).items()}
    with connection.pipeline(transaction=False) as pipe:
        # A sighting counts only while the id stays unclaimed: one claimed or gone meanwhile
        # starts again from its next sighting.
        stale = [job_id for job_id in seen if job_id not in unclaimed]
        if stale:
            pipe.hdel(key, *stale)
        for job_id in unclaimed:
            pipe.hsetnx(key, job_id, moment)
        pipe.expire(key, max(1, int(3 * grace_s)))
        pipe.execute()
    reaped = []
    for job_id in unclaimed:
        first_seen = seen.get(job_id)
        if first_seen is not None and moment - first_seen >= grace_s:
            outcome = _reap_stranded_one(queue, job_id, retries, grace_s)
            if outcome is not None:
                reaped.append(outcome)
    return reaped


def _reap_stranded_one(queue: Queue, job_id: str, retries: int, grace_s: float) -> Reaped | None:
    connection: Redis = queue.connection
    registry_key = queue.started_job_registry.key
    with connection.pipeline() as pipe:
        # The registry too: a worker claiming the job now aborts this transaction.
        pipe.watch(Job.key_for(job_id), registry_key)  # type: ignore[no-untyped-call]
        if job_id in _claimed_ids(connection, queue):
            return None
        try:
            job: Job | None = Job.fetch(job_id, connection=connection, serializer=queue.serializer)
        except NoSuchJobError:
            job = None
        queued_again = connection.lpos(queue.key, job_id) is not None
        cancelled = bool(connection.exists(cancel_key(job_id)))
        pipe.multi()
        pipe.lrem(queue.intermediate_queue_key, 0, job_id)
        pipe.hdel(unclaimed_key(queue), job_id)
        if job is None or queued_again or job.get_status(refresh=False) not in _ORPHAN_STATES:
            try:  # gone, on the queue again, or a leftover of a job that ended
                pipe.execute()
            except WatchError:
                pass
            return None
        why = f"it took the job off the queue and was not seen starting it within {grace_s:g} s"
        outcome, attempts = _requeue_or_fail(pipe, queue, job, retries, cancelled, "unknown", why)
        try:
            pipe.execute()
        except WatchError:
            return None  # claimed or written meanwhile: look again next round
    log.warning(
        "job %s %s: stranded by a dead worker (%s; attempt %d)", job_id, outcome, why, attempts
    )
    return Reaped(job_id=job_id, outcome=outcome, attempts=attempts)
