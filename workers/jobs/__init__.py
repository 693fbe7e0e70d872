"""RQ entry point and the one function that turns a job payload into a result.

``execute`` is what both paths run: inline (tests, benchmarks) and on a worker, where ``run``
fetches the input from Redis and hands ``execute`` to the worker's compute process, which the
worker kills when the job overruns its time limit or is cancelled.

A persistence task is computed by the module its input kind names
(``workers.spec.kinds.KINDS``, ``InputKind.worker``), and every result is built by
``workers.jobs.results.persistence_result``; distance tasks go to ``workers.jobs.distances``,
plot tasks to ``workers.pictures``.
"""

import functools
import importlib
import pkgutil
import time
from typing import Any, cast

import numpy as np
from pydantic import ValidationError
from redis.exceptions import WatchError
from rq import get_current_job
from rq.job import Job

from workers.claim import Claim
from workers.claim import current as current_claim
from workers.compute import ComputeProcess, JobAborted, Report, problem_for
from workers.core.errors import pointing_into
from workers.jobs import distances
from workers.jobs.results import KindWorker, persistence_result
from workers.jobs.steps import Steps, feature_step_count, ignore
from workers.pictures.plot_jobs import picture
from workers.reconnect import Gate, until_answered
from workers.settings import WorkerSettings
from workers.spec import DistanceTask, JobPayload, PersistenceTask, Problem, failures
from workers.spec.arrays import array_sha256, from_npy_bytes
from workers.spec.jobs import cancel_key, input_key
from workers.spec.kinds import kind_of
from workers.spec.plots import PlotTask

__all__ = ["execute", "execute_bytes", "run", "compute_process"]

_compute: ComputeProcess | None = None


def kind_worker(payload: JobPayload, task: PersistenceTask) -> KindWorker:
    """The module that computes ``task`` on the payload's input kind."""
    module = importlib.import_module(kind_of(payload.input.type).worker(task))
    return cast(KindWorker, module)


def execute(
    payload: JobPayload, array: np.ndarray, *, job_id: str, report: Report = ignore
) -> dict[str, Any]:
    """Compute the result of one job from its payload and its stored input array, reporting
    its steps (``workers.jobs.steps``) or, for a distance matrix, its pairs."""
    if payload.input.type not in ("image", "mask"):  # images keep their dtype until negated
        array = array.astype(np.float64, copy=False)
    task = payload.task
    if isinstance(task, DistanceTask):
        return distances.compute(payload, task, array, job_id, report)
    if isinstance(task, PlotTask):
        with pointing_into(""):  # the picture's format and size are fields of the plot query
            return picture(task, array).model_dump(mode="json")
    started = time.perf_counter()
    steps = Steps(report, planned=feature_step_count(task) + 1)  # the features, the result
    computed = kind_worker(payload, task).compute(payload, task, array, steps)
    result = persistence_result(payload, task, computed, job_id, started, steps)
    steps.finish()
    return result


def execute_bytes(header: dict[str, Any], input_bytes: bytes, report: Report) -> dict[str, Any]:
    """Entry used inside the compute child: JSON header and .npy bytes in, result dict out."""
    payload = JobPayload.model_validate(header["payload"])
    array = from_npy_bytes(input_bytes)
    return execute(payload, array, job_id=header["job_id"], report=report)


def compute_process() -> ComputeProcess:
    """This worker's compute child, forked on first use (the runner forks it at start-up)."""
    global _compute
    if _compute is None:
        # The kind modules are imported lazily by kind_worker; import them all before the fork,
        # so the child inherits them and no job maps a library (gudhi, scikit-image) under its
        # memory cap, in every fresh child again.
        for module in pkgutil.iter_modules(__path__):
            importlib.import_module(f"{__name__}.{module.name}")
        _compute = ComputeProcess(execute_bytes)
    return _compute


class JobFailed(RuntimeError):
    """Raised so RQ marks the job failed; the problem object is in ``job.meta['problem']``."""


def _checked_input(data: object, payload: JobPayload) -> np.ndarray:
    """The stored array if it is the one the service recorded, else JobAborted."""
    if not isinstance(data, bytes):
        raise JobAborted(failures.input_missing())
    try:
        array = from_npy_bytes(data)
    except ValueError:
        raise JobAborted(failures.input_corrupt()) from None
    if list(array.shape) != payload.input.shape or array_sha256(array) != payload.input.sha256:
        raise JobAborted(failures.input_corrupt())
    return array


def _runs_inline(payload: JobPayload) -> bool:
    """Is this job so small that the compute child's round trip would cost more than it?"""
    task = payload.task
    if isinstance(task, DistanceTask):
        return distances.runs_inline(payload)
    if isinstance(task, PlotTask):
        return False  # matplotlib stays out of the worker process, in the compute child
    return kind_worker(payload, task).runs_inline(payload)


@functools.cache
def _backoff_cap_s() -> float:
    return WorkerSettings().redis_backoff_max_s


_META_WRITE_ATTEMPTS = 5
"""Tries at one meta field when the job's hash or the registry changed under the write (a
heartbeat renewing claims touches the registry every interval)."""


def _write_meta_field(job: Job, claim: Claim | None, field: str, value: Any) -> bool:
    """Set ``job.meta[field]`` in Redis, leaving the other fields as Redis has them, and only
    while ``claim`` is held: RQ keeps the meta as one serialized field, and a worker that was
    reaped must not write the copy it holds over the next attempt's (its ``lost_attempts``).
    False when the claim is gone or the write kept colliding. Raises when Redis is away."""
    connection = job.connection
    for _ in range(_META_WRITE_ATTEMPTS):
        with connection.pipeline() as pipe:
            watched = [job.key] if claim is None else [job.key, claim.registry_key]
            pipe.watch(*watched)  # type: ignore[no-untyped-call]
            if claim is not None and pipe.zscore(claim.registry_key, claim.member) is None:
                return False
            raw = pipe.hget(job.key, "meta")
            meta = (
                job.serializer.loads(raw.encode() if isinstance(raw, str) else raw) if raw else {}
            )
            meta[field] = value
            pipe.multi()
            pipe.hset(job.key, "meta", job.serializer.dumps(meta))
            try:
                pipe.execute()
            except WatchError:
                continue
        job.meta = meta
        return True
    return False


def _save_progress(
    job: Job, claim: Claim | None, gate: Gate, done: int, total: int, stage: str | None = None
) -> None:
    """Progress is shown, not needed: while Redis is away it is skipped, not waited for."""
    progress: dict[str, Any] = {"done": done, "total": total}
    if stage is not None:
        progress["stage"] = stage
    gate.call(lambda: _write_meta_field(job, claim, "progress", progress), False)


def _should_stop(job: Job, claim: Claim | None, gate: Gate) -> bool:
    """Was the job asked to cancel, or reaped (its claim gone: another attempt owns it)?
    While Redis is away: neither, and the computation goes on."""

    def look() -> bool:
        pipe = job.connection.pipeline(transaction=False)
        pipe.exists(cancel_key(job.id))
        if claim is not None:
            pipe.zscore(claim.registry_key, claim.member)
        answers = pipe.execute()
        return bool(answers[0]) or (claim is not None and answers[1] is None)

    return bool(gate.call(look, False))


def run(raw_payload: dict[str, Any]) -> dict[str, Any]:
    """RQ job: read the input saved next to the job, compute in the killable child, return.

    The input stays in Redis until the worker has stored how the job ended
    (``workers.resilient``), so an attempt after a crash finds it. Redis going away does not
    stop a computation: the cancel check and progress wait for it (``workers.reconnect``),
    and the worker stores the outcome once it is back. Progress and the problem are written
    only while the job's claim is held (``workers.claim``), and a reaped job stops.
    """
    job = get_current_job()
    if job is None:
        raise RuntimeError("workers.jobs.run must run inside an RQ worker")
    connection = job.connection
    cap_s = _backoff_cap_s()
    claim = current_claim()
    give_up = None if claim is None else claim.stop_asked
    try:
        try:
            payload = JobPayload.model_validate(raw_payload)
        except ValidationError as error:
            raise JobAborted(failures.payload_invalid(f"{error.error_count()} errors")) from None

        def cancelled_and_input() -> list[Any]:
            # One round trip: was it cancelled while a worker was taking it, and its input.
            pipe = connection.pipeline()
            pipe.exists(cancel_key(job.id))
            pipe.get(input_key(job.id))
            return list(pipe.execute())

        cancelled, stored = until_answered(
            cancelled_and_input, f"reading job {job.id}", cap_s, give_up
        )
        if cancelled:
            raise JobAborted(failures.cancelled())
        array = _checked_input(stored, payload)
        if _runs_inline(payload):
            try:
                return execute(payload, array, job_id=job.id)
            except Exception as error:
                raise JobAborted(problem_for(error)) from None
        assert isinstance(stored, bytes)  # _checked_input refused anything else
        cancel_gate = Gate(f"the cancel check of job {job.id}", cap_s)
        progress_gate = Gate(f"the progress of job {job.id}", cap_s)
        return compute_process().run(
            job_id=job.id,
            payload=payload,
            input_bytes=stored,
            time_limit_s=payload.time_limit_s,
            should_stop=lambda: _should_stop(job, claim, cancel_gate),
            on_progress=functools.partial(_save_progress, job, claim, progress_gate),
        )
    except JobAborted as aborted:
        problem: Problem = aborted.problem
        body = problem.model_dump(mode="json", exclude_none=True)
        until_answered(
            lambda: _write_meta_field(job, claim, "problem", body),
            f"storing the problem of job {job.id}",
            cap_s,
            give_up,
        )
        raise JobFailed(problem.detail or problem.title) from None
