"""Point-set jobs: the Rips filtration, on a subsample when the task asks for one."""

import numpy as np

from workers import defaults
from workers.core.errors import pointing_into
from workers.core.rips import rips_diagrams
from workers.core.subsample import maxmin_subsample, random_subsample
from workers.jobs.results import Computed, DiagramSet
from workers.jobs.steps import Steps
from workers.spec import JobPayload, PersistenceTask, RipsFiltration

__all__ = ["compute", "runs_inline"]

_POINTS = {"/points": "/input/points"}


def compute(
    payload: JobPayload, task: PersistenceTask, array: np.ndarray, steps: Steps
) -> Computed:
    """Rips diagrams of the (n, d) points, edge lengths as values."""
    filtration = task.filtration
    if not isinstance(filtration, RipsFiltration):
        raise TypeError("a point-set job needs a Rips filtration")
    points, provenance = array, {}
    steps.plan(1 if filtration.subsample is None else 2)
    if filtration.subsample is not None:
        steps.begin("subsample")
        choose = maxmin_subsample if filtration.subsample.method == "maxmin" else random_subsample
        with pointing_into("/filtration/subsample", _POINTS):
            sample = choose(points, size=filtration.subsample.size, seed=filtration.subsample.seed)
        points = points[sample.indices]
        provenance = {
            "subsample_indices": sample.indices.tolist(),
            "subsample_covering_radius": sample.covering_radius,
        }
    steps.begin("persistence")  # complex and reduction: one call, no progress inside
    with pointing_into("/filtration", _POINTS):
        diagrams = rips_diagrams(points, max_dim=filtration.max_dim, max_edge=filtration.max_edge)
    return Computed(
        sets=[DiagramSet(dict(enumerate(diagrams)))],
        convention="edge_length",
        coordinate_units=payload.input.units,
        engine="rips-cut-collapse-float64",
        limit_pointer="/filtration",
        advice="lower max_dim or max_edge, or subsample",
        provenance=provenance,
    )


def runs_inline(payload: JobPayload) -> bool:
    task = payload.task
    if not isinstance(task, PersistenceTask) or not isinstance(task.filtration, RipsFiltration):
        return False
    return (
        payload.input.shape[0] <= defaults.INLINE_MAX_POINTS
        and task.filtration.max_dim <= 1
        and task.filtration.subsample is None
    )
