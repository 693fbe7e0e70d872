"""RQ entry point and the one function that turns a job payload into a result.

``execute`` is what both paths run: inline (tests, benchmarks) and on a worker, where ``run``
fetches the input from Redis and hands ``execute`` to the worker's compute process, which the
worker kills when the job overruns its time limit or is cancelled.
"""

import time
from typing import Any

import numpy as np
from pydantic import ValidationError
from rq import get_current_job

from workers.compute import ComputeProcess, JobAborted, problem_for
from workers.core.rips import rips_diagrams
from workers.core.subsample import maxmin_subsample, random_subsample
from workers.spec import (
    SCHEMA_VERSION,
    Diagram,
    DiagramResult,
    JobPayload,
    Problem,
    Provenance,
    failures,
)
from workers.spec.arrays import array_sha256, from_npy_bytes
from workers.spec.jobs import cancel_key, input_key
from workers.spec.results import package_versions

__all__ = ["execute", "execute_bytes", "run", "compute_process"]

_compute: ComputeProcess | None = None


def _diagram(dim: int, pairs: np.ndarray) -> Diagram:
    return Diagram(
        dim=dim,
        pairs=[(float(b), None if np.isinf(d) else float(d)) for b, d in pairs.tolist()],
    )


def execute(payload: JobPayload, points: np.ndarray, *, job_id: str) -> dict[str, Any]:
    """Compute the result of one job from its payload and input array (n, d) float64."""
    started = time.perf_counter()
    filtration = payload.filtration
    sample = None
    if filtration.subsample is not None:
        choose = maxmin_subsample if filtration.subsample.method == "maxmin" else random_subsample
        sample = choose(points, size=filtration.subsample.size, seed=filtration.subsample.seed)
        points = points[sample.indices]
    diagrams = rips_diagrams(points, max_dim=filtration.max_dim, max_edge=filtration.max_edge)
    elapsed = time.perf_counter() - started
    result = DiagramResult(
        job_id=job_id,
        schema_version=SCHEMA_VERSION,
        value_convention="edge_length",
        units=payload.input.units,
        diagrams=[_diagram(dim, pairs) for dim, pairs in enumerate(diagrams)],
        provenance=Provenance(
            input_sha256=payload.input.sha256,
            request_sha256=payload.request_sha256,
            versions=package_versions(),
            elapsed_s=elapsed,
            subsample_indices=None if sample is None else sample.indices.tolist(),
            subsample_covering_radius=None if sample is None else sample.covering_radius,
        ),
    )
    return result.model_dump(mode="json")


def execute_bytes(header: dict[str, Any], input_bytes: bytes) -> dict[str, Any]:
    """Entry used inside the compute child: JSON header and .npy bytes in, result dict out."""
    payload = JobPayload.model_validate(header["payload"])
    points = from_npy_bytes(input_bytes).astype(np.float64, copy=False)
    return execute(payload, points, job_id=header["job_id"])


def compute_process() -> ComputeProcess:
    """This worker's compute child, forked on first use (the runner forks it at start-up)."""
    global _compute
    if _compute is None:
        _compute = ComputeProcess(execute_bytes)
    return _compute


class JobFailed(RuntimeError):
    """Raised so RQ marks the job failed; the problem object is in ``job.meta['problem']``."""


INLINE_MAX_POINTS = 150
"""Rips jobs up to this many points (H0/H1, no subsample) run in the worker itself: they take
at most ~20 ms, far below any time limit, so the compute child's round trip would only
add overhead."""


def _checked_input(data: object, payload: JobPayload) -> np.ndarray:
    """The stored array if it is the one the service recorded, else JobAborted."""
    if not isinstance(data, bytes):
        raise JobAborted(failures.input_missing())
    try:
        points = from_npy_bytes(data)
    except ValueError:
        raise JobAborted(failures.input_corrupt()) from None
    if tuple(points.shape) != payload.input.shape or array_sha256(points) != payload.input.sha256:
        raise JobAborted(failures.input_corrupt())
    return points.astype(np.float64, copy=False)


def _runs_inline(payload: JobPayload) -> bool:
    filtration = payload.filtration
    return (
        payload.input.shape[0] <= INLINE_MAX_POINTS
        and filtration.max_dim <= 1
        and filtration.subsample is None
    )


def run(raw_payload: dict[str, Any]) -> dict[str, Any]:
    """RQ job: read the input saved next to the job, compute in the killable child, return."""
    job = get_current_job()
    if job is None:
        raise RuntimeError("workers.jobs.run must run inside an RQ worker")
    connection = job.connection
    try:
        try:
            payload = JobPayload.model_validate(raw_payload)
        except ValidationError as error:
            raise JobAborted(failures.payload_invalid(f"{error.error_count()} errors")) from None
        # One round trip: was it cancelled while a worker was taking it, and its input
        # (taken out of Redis at once: from here on it lives in this process only).
        pipe = connection.pipeline()
        pipe.exists(cancel_key(job.id))
        pipe.getdel(input_key(job.id))
        cancelled, stored = pipe.execute()
        if cancelled:
            raise JobAborted(failures.cancelled())
        points = _checked_input(stored, payload)
        if _runs_inline(payload):
            try:
                return execute(payload, points, job_id=job.id)
            except Exception as error:
                raise JobAborted(problem_for(error)) from None
        assert isinstance(stored, bytes)  # _checked_input refused anything else
        return compute_process().run(
            job_id=job.id,
            payload=payload,
            input_bytes=stored,
            time_limit_s=payload.time_limit_s,
            should_stop=lambda: bool(connection.exists(cancel_key(job.id))),
        )
    except JobAborted as aborted:
        connection.delete(input_key(job.id))  # if the payload was refused before GETDEL
        problem: Problem = aborted.problem
        job.meta["problem"] = problem.model_dump(mode="json", exclude_none=True)
        job.save_meta()
        raise JobFailed(problem.detail or problem.title) from None
