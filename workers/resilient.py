"""The worker class: RQ's ``SimpleWorker`` that outlives Redis outages and shows it is alive.

What RQ does itself is kept: its dequeue loop retries a lost connection with a growing wait
(capped here at ``redis_backoff_max_s``) and its pubsub thread reconnects. Everything else it
does against Redis between two jobs would end the worker on the first lost connection
(``work`` quits on any error), so each is wrapped in ``until_answered``: registering,
suspension checks, worker state, preparing a job, storing its result or its failure (a
computed result waits for Redis, however long). Maintenance is skipped while Redis is away.

Liveness is ``workers.liveness``: a heartbeat thread, registrations and claims that lapse
after ``dead_after_s``, a name taken over from a dead predecessor. Before storing what a job
ended with, the worker renews the job's claim if it still holds it (one MULTI/EXEC, which
aborts a reap that read the old score); one reaped meanwhile (``workers.reaper``: the worker
was cut off too long) belongs to another attempt, and this one's outcome is dropped.
"""

import logging
import time
from typing import Any

from redis import Redis
from rq import Queue, SimpleWorker, worker_registration
from rq.exceptions import InvalidJobOperation
from rq.executions import Execution
from rq.job import Job, JobStatus
from rq.registry import (
    DeferredJobRegistry,
    FailedJobRegistry,
    FinishedJobRegistry,
    ReadyJobRegistry,
    StartedJobRegistry,
)
from rq.utils import current_timestamp, now

from workers.claim import Claim, holding
from workers.liveness import Heartbeat, claim_name, release_name
from workers.reconnect import LOST, Backoff, until_answered
from workers.settings import WorkerSettings
from workers.spec.jobs import input_key

__all__ = ["ResilientWorker"]

log = logging.getLogger(__name__)

_DEATH_ATTEMPTS = 3
"""Tries at registering death on shutdown; after them the registration lapses by itself."""

_FAILURE_ATTEMPTS = 8
"""Tries at storing a failure Redis answered but did not keep (not an outage: a refused
command); after them the job is left to the reaper."""


class ResilientWorker(SimpleWorker):
    """A SimpleWorker with a heartbeat thread, lapsing claims and retries around Redis."""

    def __init__(
        self,
        queues: list[Queue],
        *,
        settings: WorkerSettings,
        beat_connection: Redis,
        **kwargs: Any,
    ) -> None:
        # RQ blocks on the queue for worker_ttl - 15 s: a lifetime, so a dequeue stuck on a
        # dead connection is noticed as soon as a beat would be missed.
        super().__init__(queues, worker_ttl=settings.dead_after_s + 15, **kwargs)
        self.settings = settings
        self.max_connection_wait_time = settings.redis_backoff_max_s
        self.heartbeat_thread = Heartbeat(self, beat_connection, settings)
        self._abandoned: list[Execution] = []

    def _until_answered(self, what: str, call: Any) -> Any:
        return until_answered(call, what, self.settings.redis_backoff_max_s, self.stop_asked)

    def stop_asked(self) -> bool:
        """Was this worker asked to stop (a first SIGTERM, or a stop command)?"""
        return bool(self._stop_requested)

    # Liveness: one lifetime for the registration and every claim, renewed by the thread.

    def get_heartbeat_ttl(self, job: Job, working_time: float = 0.0) -> int:
        return self.settings.dead_after_s

    def heartbeat(self, timeout: int | None = None, pipeline: Any = None) -> None:
        if pipeline is not None:
            super().heartbeat(self.settings.dead_after_s, pipeline=pipeline)
            return
        try:
            super().heartbeat(self.settings.dead_after_s)
        except LOST:
            pass  # the heartbeat thread keeps trying; this beat only repeats its work

    def register_birth(self) -> None:
        self._until_answered("claiming the worker name", lambda: claim_name(self, self.settings))
        self._until_answered("registering", super().register_birth)
        self._until_answered("registering", lambda: release_name(self))

    def bootstrap(self, *args: Any, **kwargs: Any) -> None:
        super().bootstrap(*args, **kwargs)
        self.heartbeat_thread.start()

    def subscribe(self) -> None:
        self._until_answered("subscribing to commands", super().subscribe)

    def teardown(self) -> None:
        if self.heartbeat_thread.is_alive():
            self.heartbeat_thread.stop()
        super().teardown()  # type: ignore[no-untyped-call]

    def set_shutdown_requested_date(self) -> None:
        # Called from RQ's SIGTERM handler, so an error here lands in whatever the main thread
        # was doing (waiting on the computation) and fails the job; the field is informational.
        try:
            super().set_shutdown_requested_date()  # type: ignore[no-untyped-call]
        except LOST as error:
            log.warning("worker %s: stop request not recorded, Redis away (%s)", self.name, error)

    def register_death(self) -> None:
        for _ in range(_DEATH_ATTEMPTS):
            try:
                super().register_death()  # type: ignore[no-untyped-call]
                return
            except LOST as error:
                log.warning("worker %s: cannot register death (%s)", self.name, error)
        log.warning("worker %s: leaving the registration to lapse", self.name)

    # The loop between jobs.

    def set_state(self, state: str, pipeline: Any = None) -> None:
        if pipeline is not None:
            super().set_state(state, pipeline=pipeline)
            return
        self._until_answered(f"setting state {state}", lambda: SimpleWorker.set_state(self, state))

    def check_for_suspension(self, burst: bool) -> None:
        self._until_answered(
            "checking for suspension", lambda: SimpleWorker.check_for_suspension(self, burst)
        )

    def run_maintenance_tasks(self) -> None:
        try:
            super().run_maintenance_tasks()  # type: ignore[no-untyped-call]
        except LOST as error:
            log.warning("worker %s: maintenance skipped, Redis unreachable (%s)", self.name, error)

    def clean_registries(self) -> None:
        """RQ's registry maintenance without the StartedJobRegistry and the intermediate queue,
        which the reaper owns (RQ's own cleanup of either fails the job without a retry or a
        reason)."""
        for queue in self.queues:
            if not queue.acquire_maintenance_lock():
                continue
            for registry in (
                FinishedJobRegistry,
                FailedJobRegistry,
                DeferredJobRegistry,
                ReadyJobRegistry,
            ):
                registry(queue=queue).cleanup()
            worker_registration.clean_worker_registry(queue)
            queue.release_maintenance_lock()
        self.last_cleaned_at = now()  # type: ignore[assignment]  # RQ annotates it None

    # A job's start and end.

    def prepare_execution(self, job: Job) -> Execution:
        def attempt() -> Execution:
            try:
                return super(ResilientWorker, self).prepare_execution(job)
            except LOST:
                # Its claim may have been stored before the answer was lost: drop it once
                # Redis answers, or the reaper would take it for a dead worker's job.
                for execution in list(self.executions.values()):
                    self.executions.pop(execution.id, None)
                    self._abandoned.append(execution)
                raise

        execution: Execution = self._until_answered(f"starting job {job.id}", attempt)
        if self._abandoned:
            registry = StartedJobRegistry(job.origin, self.connection).key
            stale = [execution.composite_key for execution in self._abandoned]
            self._abandoned.clear()
            self._until_answered(
                "dropping half-made claims", lambda: self.connection.zrem(registry, *stale)
            )
        return execution

    def perform_job(self, job: Job, queue: Queue, execution: Execution) -> bool:
        claim = Claim(
            connection=self.connection,
            registry_key=StartedJobRegistry(job.origin, self.connection).key,
            member=execution.composite_key,
            stop_asked=self.stop_asked,
        )
        with holding(claim):
            return bool(super().perform_job(job, queue, execution))

    def prepare_job_execution(self, job: Job, remove_from_intermediate_queue: bool = False) -> None:
        self._until_answered(
            f"starting job {job.id}",
            lambda: super(ResilientWorker, self).prepare_job_execution(
                job, remove_from_intermediate_queue
            ),
        )

    def handle_execution_ended(self, job: Job, queue: Queue, heartbeat_ttl: int) -> None:
        self._until_answered(
            f"ending job {job.id}",
            lambda: super(ResilientWorker, self).handle_execution_ended(job, queue, heartbeat_ttl),
        )

    def _renew_claim(self, job: Job, execution: Execution) -> bool:
        """Renew the claim of ``execution`` for one lifetime iff it is still there; is it ours?

        One MULTI/EXEC (renew only if present, then read it), run right before a store: a reap
        that read the old score is aborted by the renewal (the reaper watches the registry),
        and a reap done before it leaves nothing to renew."""
        key = StartedJobRegistry(job.origin, self.connection).key
        with self.connection.pipeline() as pipe:
            pipe.zadd(
                key,
                {execution.composite_key: current_timestamp() + self.settings.dead_after_s},
                xx=True,
            )
            pipe.zscore(key, execution.composite_key)
            held = pipe.execute()[1] is not None
        return held

    def _dropped(self, job: Job, execution: Execution) -> None:
        """The claim was gone at the store: reaped, or removed by our own store whose answer
        Redis lost (the retry then finds the job ended). An ended job's input is not needed
        by any attempt; a requeued one's is."""
        self.executions.pop(execution.id, None)
        try:
            status = self._until_answered(
                f"reading the state of job {job.id}", lambda: job.get_status(refresh=True)
            )
        except InvalidJobOperation:  # expired meanwhile
            return
        if status in (JobStatus.FINISHED, JobStatus.FAILED):
            self._drop_input(job)
            return
        log.warning(
            "worker %s: job %s was reaped while this worker was cut off; its outcome here "
            "is dropped (the job was queued again)",
            self.name,
            job.id,
        )

    def _drop_input(self, job: Job) -> None:
        """The input stays while a job runs, so a retry after a crash finds it."""
        self._until_answered(
            f"deleting the input of job {job.id}",
            lambda: self.connection.delete(input_key(job.id)),
        )

    def handle_job_success(
        self, job: Job, queue: Queue, started_job_registry: StartedJobRegistry, execution: Execution
    ) -> None:
        def store() -> bool:
            if not self._renew_claim(job, execution):
                return False
            super(ResilientWorker, self).handle_job_success(
                job, queue, started_job_registry, execution
            )
            return True

        if not self._until_answered(f"storing the result of job {job.id}", store):
            self._dropped(job, execution)
            return
        self._drop_input(job)

    def handle_job_failure(
        self,
        job: Job,
        queue: Queue,
        started_job_registry: StartedJobRegistry | None = None,
        exc_string: str = "",
        execution: Execution | None = None,
    ) -> None:
        def store() -> bool:
            if execution is not None and not self._renew_claim(job, execution):
                return False
            super(ResilientWorker, self).handle_job_failure(
                job, queue, started_job_registry, exc_string, execution
            )
            return True

        backoff = Backoff(self.settings.redis_backoff_max_s)
        for _ in range(_FAILURE_ATTEMPTS):
            # RQ logs a failure it could not store and goes on: look whether it was stored.
            if not self._until_answered(f"storing the failure of job {job.id}", store):
                if execution is not None:
                    self._dropped(job, execution)
                return
            if self._failure_stored(job):
                self._drop_input(job)
                return
            time.sleep(backoff.next_wait())
        log.error(
            "worker %s: the failure of job %s could not be stored after %d attempts; its claim "
            "lapses and the reaper takes the job",
            self.name,
            job.id,
            _FAILURE_ATTEMPTS,
        )
        if execution is not None:
            self.executions.pop(execution.id, None)

    def _failure_stored(self, job: Job) -> bool:
        try:
            status = self._until_answered(
                f"reading the state of job {job.id}", lambda: job.get_status(refresh=True)
            )
        except InvalidJobOperation:  # expired: nothing left to store
            return True
        return bool(status != JobStatus.STARTED)
