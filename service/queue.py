"""Submitting jobs to RQ and reading them back; the only module of service/ that knows RQ.

Every lookup goes through ``JobQueue.find(job_id, owner)``: a job belongs to the owner it was
submitted under (``job.meta['owner']``), so scoping by tenant later changes who the owner is,
not how jobs are stored.
"""

import functools
import logging
import time
import uuid
from datetime import UTC, datetime, timedelta
from typing import Any

from redis import Redis
from redis.exceptions import RedisError
from rq import Callback, Queue, Worker
from rq.exceptions import NoSuchJobError
from rq.job import Job
from rq.job import JobStatus as RQStatus
from rq.results import Result
from rq.serializers import JSONSerializer
from rq.utils import as_text, utcformat, utcparse

from service.errors import (
    IdempotencyKeyReused,
    JobAlreadyEnded,
    JobHasNoResult,
    JobNotFound,
    NotReady,
    QuotaExceeded,
    RequestInvalid,
)
from service.quotas import UnfinishedJobs
from service.request_ids import current_request_id
from service.settings import Settings
from service.submissions import Submission, stored_input
from workers.spec import SCHEMA_VERSION, FieldError, JobPayload, JobState, JobStatus, Progress
from workers.spec.arrays import array_sha256, canonical_sha256, to_npy_bytes
from workers.spec.failures import worker_lost
from workers.spec.jobs import JOB_FUNCTION, cancel_key, input_key
from workers.spec.metrics import FAILURE_CALLBACK, SUCCESS_CALLBACK
from workers.spec.problems import CANCELLED_TYPE

__all__ = ["Job", "JobQueue"]  # Job: the handle routes get from and give back to JobQueue

log = logging.getLogger(__name__)

IDEMPOTENCY_PREFIX = "lacuna:idempotency:"
"""Redis key prefix of Idempotency-Key records: ``<prefix><owner>:<key>`` -> job id and the
request hash, for ``Settings.idempotency_ttl_s``."""

# A worker that dies mid-job leaves RQ status "started" until a live worker's reaper notices
# its lapsed claim (workers/reaper.py, within the workers' dead_after_s plus one heartbeat):
# the job is queued again, or failed with the worker-lost problem saying why. A failed job
# without a problem (RQ's own cleanup, from older workers) reads as worker-lost too.
_STATES = {
    RQStatus.CREATED: JobState.queued,
    RQStatus.QUEUED: JobState.queued,
    RQStatus.DEFERRED: JobState.queued,
    RQStatus.SCHEDULED: JobState.queued,
    RQStatus.READY_TO_ENQUEUE: JobState.queued,
    RQStatus.RATE_LIMITED: JobState.queued,
    RQStatus.STARTED: JobState.running,
    RQStatus.FINISHED: JobState.succeeded,
    RQStatus.FAILED: JobState.failed,
    RQStatus.STOPPED: JobState.failed,
    RQStatus.CANCELED: JobState.cancelled,
}
_UNFINISHED = (JobState.queued, JobState.running)


def _utc(moment: datetime | None) -> datetime | None:
    if moment is None:
        return None
    return moment.replace(tzinfo=UTC) if moment.tzinfo is None else moment


class JobQueue:
    """Jobs on one RQ queue, stored and read with the JSON serializer only."""

    def __init__(self, redis: Redis, waiting_redis: Redis, settings: Settings) -> None:
        self.redis = redis
        self._waiting_redis = waiting_redis  # its socket timeout outlasts a Prefer: wait
        self.settings = settings
        self.queue = Queue(settings.queue, connection=redis, serializer=JSONSerializer)
        self.unfinished = UnfinishedJobs(redis, settings)

    def submit(
        self,
        submission: Submission,
        owner: str,
        idempotency_key: str | None = None,
        *,
        counted: bool = True,
    ) -> Job:
        """Store the input array next to the job and enqueue ``workers.jobs.run``.

        With ``idempotency_key``, a request equal to the one first sent under that key (the
        same request hash) within ``Settings.idempotency_ttl_s`` gets that job back instead of
        a new one; a different request under the key is IdempotencyKeyReused. A new job
        counts against the owner's ``max_unfinished_jobs`` (QuotaExceeded when it is full)
        unless not ``counted`` (the API's own plot jobs).
        """
        input_sha = array_sha256(submission.array)
        request_sha = canonical_sha256({"request": submission.described, "input_sha256": input_sha})
        job_id = str(uuid.uuid4())
        if idempotency_key is None:
            return self._enqueue(submission, owner, job_id, input_sha, request_sha, counted)
        record = f"{IDEMPOTENCY_PREFIX}{owner}:{idempotency_key}"
        claim = f"{job_id} {request_sha}"
        earlier = self._claim(record, claim, idempotency_key, owner)
        if earlier is not None:
            return earlier
        try:
            return self._enqueue(submission, owner, job_id, input_sha, request_sha, counted)
        except BaseException:
            self._release(record, claim)  # a retry under the key may queue the job anew
            raise

    def _claim(self, record: str, claim: str, key: str, owner: str) -> Job | None:
        """Hold ``record`` with ``claim`` ("<job id> <request hash>") and answer None, or
        answer the job of the same request that already holds it."""
        ttl = self.settings.idempotency_ttl_s
        while not self.redis.set(record, claim, nx=True, ex=ttl):
            raw = self.redis.get(record)
            if raw is None:  # expired between the two calls
                continue
            held = raw.decode() if isinstance(raw, bytes) else str(raw)
            earlier_id, earlier_sha = held.split(" ")
            if earlier_sha != claim.split(" ")[1]:
                raise IdempotencyKeyReused(key, earlier_id)
            try:
                return self.find(earlier_id, owner)
            except JobNotFound:
                pass
            age = ttl - self.redis.ttl(record)
            if age <= self.settings.idempotency_claim_wait_s:  # the first request is enqueueing
                time.sleep(0.05)
            else:  # its job expired before the key did, or was never queued: start over
                self._release(record, held)
        return None

    def _release(self, record: str, claim: str) -> None:
        """Delete ``record`` if it still holds ``claim`` (never another request's claim)."""
        self._release_script(keys=[record], args=[claim])

    @functools.cached_property
    def _release_script(self) -> Any:
        return self.redis.register_script(
            "if redis.call('GET', KEYS[1]) == ARGV[1] then "
            "return redis.call('DEL', KEYS[1]) end return 0"
        )

    def _enqueue(
        self,
        submission: Submission,
        owner: str,
        job_id: str,
        input_sha: str,
        request_sha: str,
        counted: bool = True,
    ) -> Job:
        request_id = current_request_id()
        payload = JobPayload(
            schema_version=SCHEMA_VERSION,
            input=stored_input(submission, input_sha),
            task=submission.task,
            request_sha256=request_sha,
            time_limit_s=self.settings.job_time_limit_s,
            memory_limit_mb=self.settings.job_memory_limit_mb,
            max_result_pairs=self.settings.max_result_pairs,
            max_dowker_simplices=self.settings.max_dowker_simplices,
            request_id=request_id,
        )
        keep = self.settings.queued_ttl_s + int(self.settings.job_time_limit_s)
        if not counted:
            return self._enqueue_reserved(submission, owner, job_id, payload, keep)
        reservation = self.unfinished.reserve(owner, job_id)
        if not reservation.added:
            raise QuotaExceeded(
                owner,
                "max_unfinished_jobs",
                reservation.limit,
                self.settings.retry_after_s,
                f"{reservation.count} jobs are queued or running; retry when some have ended "
                "(or cancel some)",
            )
        try:
            return self._enqueue_reserved(submission, owner, job_id, payload, keep)
        except BaseException:
            self.unfinished.release(owner, job_id)
            raise

    def _enqueue_reserved(
        self, submission: Submission, owner: str, job_id: str, payload: JobPayload, keep: int
    ) -> Job:
        # One MULTI/EXEC for the job and its input: no worker can see one without the other.
        with self.redis.pipeline() as pipe:
            job = self.queue.enqueue(
                JOB_FUNCTION,
                payload.model_dump(mode="json"),
                job_id=job_id,
                description=submission.description,
                job_timeout=int(self.settings.job_time_limit_s) + self.settings.rq_timeout_margin_s,
                result_ttl=self.settings.result_ttl_s,
                failure_ttl=self.settings.result_ttl_s,
                ttl=self.settings.queued_ttl_s,
                meta={"owner": owner, "request_id": payload.request_id, "request": submission.sent},
                # Run on the worker, by name: durations and failures counted where jobs end.
                on_success=Callback(SUCCESS_CALLBACK),
                on_failure=Callback(FAILURE_CALLBACK),
                pipeline=pipe,  # RQ opens the transaction; the input joins it
            )
            pipe.set(input_key(job_id), to_npy_bytes(submission.array), ex=keep)
            pipe.execute()
        log.info("queued job %s", job_id, extra={"job_id": job_id})
        return job

    def find(self, job_id: str, owner: str) -> Job:
        """The job ``job_id`` if it exists and belongs to ``owner``; JobNotFound otherwise."""
        # Only the canonical form (lowercase, hyphenated: what submit makes) names a job;
        # uuid.UUID also takes braces, urn:uuid: and upper case, which RQ cannot fetch.
        try:
            canonical = len(job_id) == 36 and str(uuid.UUID(job_id)) == job_id
        except ValueError:
            canonical = False
        if not canonical:
            raise JobNotFound(job_id[:80])
        try:
            job = Job.fetch(job_id, connection=self.redis, serializer=JSONSerializer)
        except NoSuchJobError:
            raise JobNotFound(job_id) from None
        if job.meta.get("owner") != owner:
            raise JobNotFound(job_id)
        return job

    def results_of(self, job_ids: list[str], owner: str, pointer: str) -> list[dict[str, Any]]:
        """Results of succeeded jobs, in order; RequestInvalid pointing at each that is
        unknown, unfinished or failed (``pointer`` is where the ids sit in the body)."""
        results: list[dict[str, Any]] = []
        errors: list[FieldError] = []
        for index, job_id in enumerate(job_ids):
            try:
                results.append(self.result(self.find(job_id, owner)))
            except (JobNotFound, JobHasNoResult) as error:
                errors.append(FieldError(pointer=f"{pointer}/{index}", message=error.detail))
        if errors:
            raise RequestInvalid(errors)
        return results

    def _refresh(self, job: Job) -> None:
        try:
            job.refresh()
        except NoSuchJobError:  # expired between two reads
            raise JobNotFound(job.id) from None

    def state(self, job: Job) -> JobState:
        state = _STATES.get(job.get_status(refresh=False) or RQStatus.QUEUED, JobState.queued)
        problem = job.meta.get("problem")
        if state is JobState.failed and problem and problem.get("type") == CANCELLED_TYPE:
            return JobState.cancelled
        return state

    def status(self, job: Job) -> JobStatus:
        state = self.state(job)
        problem = job.meta.get("problem") if state is JobState.failed else None
        if state is JobState.failed and problem is None:
            problem = worker_lost().model_dump(mode="json", exclude_none=True)
        links = {"self": f"/v1/jobs/{job.id}"}
        if state is JobState.succeeded:
            links["result"] = f"/v1/jobs/{job.id}/result"
        progress = job.meta.get("progress")
        return JobStatus(
            job_id=job.id,
            status=state,
            progress=Progress.model_validate(progress) if progress else None,
            created_at=_utc(job.created_at),
            started_at=_utc(job.started_at),
            ended_at=_utc(job.ended_at),
            problem=problem,
            links=links,
        )

    def result(self, job: Job) -> dict[str, Any]:
        """The result of a succeeded job; JobHasNoResult for any other state."""
        state = self.state(job)
        if state is JobState.succeeded:
            latest = job.latest_result()
            if latest is not None and latest.type == Result.Type.SUCCESSFUL:
                value: dict[str, Any] = latest.return_value or {}
                return value
        raise JobHasNoResult(job.id, state.value)

    def wait(self, job: Job, seconds: int) -> dict[str, Any] | None:
        """Block until an unfinished job ends, at most ``seconds``.

        Returns the result when the job succeeded during the wait (read from the very
        answer that woke the wait); otherwise None, with ``job`` refreshed.
        """
        if seconds <= 0 or self.state(job) not in _UNFINISHED:
            return None
        waiting = Job(job.id, connection=self._waiting_redis, serializer=JSONSerializer)
        latest = waiting.latest_result(timeout=seconds)
        if latest is not None and latest.type == Result.Type.SUCCESSFUL:
            value: dict[str, Any] = latest.return_value or {}
            return value
        self._refresh(job)
        return None

    def cancel(self, job: Job) -> None:
        """Cancel a queued or running job; JobAlreadyEnded once it has ended."""
        state = self.state(job)
        if state not in _UNFINISHED:
            raise JobAlreadyEnded(job.id, state.value)
        # A running job polls this key and kills its compute process; it also stops a job
        # that a worker takes between the state read above and the removal below.
        self.redis.set(cancel_key(job.id), b"1", ex=self.settings.result_ttl_s)
        # LREM is atomic: 1 means no worker has the job, so nobody else writes its status.
        if self.queue.remove(job.id):
            # No worker ends it, so this is its end: the status shows when (ended_at).
            with self.redis.pipeline() as pipe:
                job.set_status(RQStatus.CANCELED, pipeline=pipe)
                pipe.hset(job.key, "ended_at", utcformat(datetime.now(UTC)))
                pipe.expire(job.key, self.settings.result_ttl_s)
                pipe.execute()
            self.redis.delete(input_key(job.id))
        self._refresh(job)
        ended = self.state(job)
        if ended in (JobState.succeeded, JobState.failed):  # it ended before the request
            raise JobAlreadyEnded(job.id, ended.value)

    def payload_of(self, job: Job) -> JobPayload:
        """The payload the job was queued with (what it computes, with resolved specs)."""
        return JobPayload.model_validate(job.args[0])

    def remaining_ttl_s(self, job: Job) -> int | None:
        """Seconds until ``job`` (and its result) expires: None when it never does, 0 once
        it is gone."""
        remaining = int(self.redis.ttl(job.key))  # -1: no expiry, -2: no such key
        return None if remaining == -1 else max(remaining, 0)

    def request_as_sent(self, job: Job) -> dict[str, str] | None:
        """The request as the client sent it (``Submission.sent``: its media type and text),
        or None for a job queued before requests were kept."""
        sent: dict[str, str] | None = job.meta.get("request")
        return sent

    def discard(self, job: Job) -> None:
        """Delete a job that has served its purpose (a picture once sent), and its input."""
        job.delete()
        self.redis.delete(input_key(job.id), cancel_key(job.id))
        self.unfinished.release(str(job.meta.get("owner")), job.id)

    def ready_workers(self) -> int:
        """Live workers on the queue: registered, not dead, their last heartbeat at most
        ``Settings.dead_after_s`` old. NotReady without Redis or without one."""
        try:
            keys = sorted(Worker.all_keys(connection=self.redis, queue=self.queue))
            with self.redis.pipeline(transaction=False) as pipe:
                for key in keys:
                    pipe.hmget(key, ["last_heartbeat", "death"])
                registrations = pipe.execute()
        except RedisError as error:
            raise NotReady(f"Redis unreachable ({type(error).__name__})") from None
        oldest = datetime.now(UTC) - timedelta(seconds=self.settings.dead_after_s)
        live = 0
        for beat, death in registrations:
            if beat is not None and death is None:
                beaten = utcparse(as_text(beat))
                if (beaten.replace(tzinfo=UTC) if beaten.tzinfo is None else beaten) >= oldest:
                    live += 1
        if live < 1:
            raise NotReady(
                f"no live worker on the queue (none has sent a heartbeat in the last "
                f"{self.settings.dead_after_s} s)"
            )
        return live
