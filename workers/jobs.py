"""RQ entry point and the one function that turns a job payload into a result.

``execute`` is what both paths run: inline (tests, benchmarks) and on a worker, where ``run``
fetches the input from Redis and hands ``execute`` to the worker's compute process, which the
worker kills when the job overruns its time limit or is cancelled.
"""

import time
from importlib.metadata import version
from typing import Any

import numpy as np
from rq import get_current_job

from workers.compute import CANCELLED, ComputeProcess, JobAborted
from workers.core.rips import rips_diagrams
from workers.core.subsample import maxmin_subsample, random_subsample
from workers.spec import SCHEMA_VERSION, Diagram, DiagramResult, JobPayload, Problem, Provenance
from workers.spec.arrays import from_npy_bytes
from workers.spec.jobs import cancel_key, input_key
from workers.spec.results import PROVENANCE_PACKAGES

__all__ = ["execute", "run", "library_versions", "compute_process"]

_compute: ComputeProcess | None = None


def library_versions() -> dict[str, str]:
    """Versions of the code that shapes a result, recorded in every provenance."""
    return {name: version(name) for name in PROVENANCE_PACKAGES}


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
            versions=library_versions(),
            elapsed_s=elapsed,
            subsample_indices=None if sample is None else sample.indices.tolist(),
            subsample_covering_radius=None if sample is None else sample.covering_radius,
        ),
    )
    return result.model_dump(mode="json")


def compute_process() -> ComputeProcess:
    """This worker's compute child, forked on first use (the runner forks it at start-up)."""
    global _compute
    if _compute is None:
        _compute = ComputeProcess(execute_bytes)
    return _compute


class JobFailed(RuntimeError):
    """Raised so RQ marks the job failed; the problem object is in ``job.meta['problem']``."""


def run(raw_payload: dict[str, Any]) -> dict[str, Any]:
    """RQ job: read the input saved next to the job, compute in the killable child, return."""
    job = get_current_job()
    if job is None:
        raise RuntimeError("workers.jobs.run must run inside an RQ worker")
    connection = job.connection

    def fail(problem: Problem) -> JobFailed:
        job.meta["problem"] = problem.model_dump(mode="json", exclude_none=True)
        job.save_meta()
        return JobFailed(problem.detail or problem.title)

    payload = JobPayload.model_validate(raw_payload)
    if connection.exists(cancel_key(job.id)):  # cancelled while a worker was taking it
        raise fail(CANCELLED)
    data = connection.get(input_key(job.id))
    if not isinstance(data, bytes):  # gone (expired) when the worker took the job
        raise fail(
            Problem(
                title="Input expired",
                status=410,
                detail="the input of this job was no longer stored when a worker took it",
            )
        )
    try:
        return compute_process().run(
            job_id=job.id,
            payload=payload,
            input_bytes=data,
            time_limit_s=payload.time_limit_s,
            should_stop=lambda: bool(connection.exists(cancel_key(job.id))),
        )
    except JobAborted as aborted:
        raise fail(aborted.problem) from None
    finally:
        connection.delete(input_key(job.id))


def execute_bytes(header: dict[str, Any], input_bytes: bytes) -> dict[str, Any]:
    """Entry used inside the compute child: JSON header and .npy bytes in, result dict out."""
    payload = JobPayload.model_validate(header["payload"])
    points = from_npy_bytes(input_bytes).astype(np.float64, copy=False)
    return execute(payload, points, job_id=header["job_id"])
