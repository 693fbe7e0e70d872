"""Distance jobs: the matrix between stored diagrams (rows of (index, birth, death)) or
vectors (N, L), on all cores (``workers.jobs.pairwise``), or on as many as the job's memory
limit holds the costliest pair on (its estimate, ``workers.spec.costs``)."""

import time
from typing import Any

import numpy as np

from workers import defaults, memory
from workers.compute import Report
from workers.core.errors import pointing_into
from workers.jobs.pairwise import distance_matrix, usable_cores
from workers.jobs.results import provenance
from workers.spec import SCHEMA_VERSION, DistanceResult, DistanceTask, JobPayload
from workers.spec.arrays import diagrams_of_rows
from workers.spec.costs import largest_pair_peak
from workers.spec.results import Engine

__all__ = ["DISTANCES_STAGE", "DISTANCE_ENGINES", "affordable_processes", "compute", "runs_inline"]

DISTANCES_STAGE = "distances"
"""The stage of a distance job's progress, which counts pairs."""

DISTANCE_ENGINES: dict[str, Engine] = {
    "bottleneck": "bottleneck-lacuna",
    "wasserstein": "wasserstein-lacuna",
    "sliced_wasserstein": "sliced-wasserstein-lacuna",
    "euclidean": "vector-lacuna",
    "cosine": "vector-lacuna",
}
"""The engine of each metric, as provenance names it."""


def compute(
    payload: JobPayload, task: DistanceTask, array: np.ndarray, job_id: str, report: Report
) -> dict[str, Any]:
    """The DistanceResult (as JSON) of ``task`` on the stored items."""
    started = time.perf_counter()
    if payload.input.type == "vectors":
        items: list[np.ndarray] = list(array)
    else:
        by_index = diagrams_of_rows(array, list(range(task.count)))
        items = [by_index[index] for index in range(task.count)]
    with pointing_into(""):  # the metric's parameters are fields of the distance request
        matrix, nulls = distance_matrix(
            items,
            task,
            lambda done, total: report(done, total, DISTANCES_STAGE),
            processes=affordable_processes(task, items),
        )
    finite = np.isfinite(matrix)
    diagram_metric = payload.input.type != "vectors"
    result = DistanceResult.model_validate(
        {
            "job_id": job_id,
            "schema_version": SCHEMA_VERSION,
            "metric": task.metric,
            "order": task.order,
            "directions": task.directions,
            "dim": task.dim,
            "never_dying": task.never_dying,
            "ground_metric": "l_infinity" if diagram_metric else None,
            "units": payload.input.units,  # the shared units of the diagrams (submission)
            "count": task.count,
            "matrix": [
                [float(v) if ok else None for v, ok in zip(row, oks, strict=True)]
                for row, oks in zip(matrix.tolist(), finite.tolist(), strict=True)
            ],
            "nulls": nulls,
            "provenance": provenance(payload, started, DISTANCE_ENGINES[task.metric]),
        }
    )
    return result.model_dump(mode="json")


def affordable_processes(task: DistanceTask, items: list[np.ndarray]) -> int:
    """Processes for a matrix: one per core, fewer when the memory limit, shared among them,
    would not hold the costliest pair's estimated peak in each."""
    cores = usable_cores()
    room = memory.headroom()
    if cores == 1 or room is None or task.metric in ("euclidean", "cosine"):
        return cores
    need = largest_pair_peak(task, np.array([len(item) for item in items]))
    return max(1, min(cores, int(room // max(need, 1.0))))


def runs_inline(payload: JobPayload) -> bool:
    task = payload.task
    return (
        isinstance(task, DistanceTask)
        and task.count <= defaults.INLINE_MAX_DISTANCE_ITEMS
        and payload.input.shape[0] <= defaults.INLINE_MAX_DISTANCE_ROWS
    )
