"""Dowker jobs: the Dowker filtration of one class of labelled points witnessed by another,
refused before building when its candidate simplices are over the limit."""

from typing import TypedDict

import numpy as np

from workers.core.dowker import Side, dowker_diagrams, dowker_size
from workers.core.errors import RequestError, pointing_into
from workers.jobs.points import labelled_fields
from workers.jobs.results import Computed, DiagramSet
from workers.jobs.steps import Steps
from workers.spec import JobPayload, PersistenceTask
from workers.spec.filtrations import DowkerFiltration

__all__ = ["compute", "runs_inline"]

_CLASSES = {"/vertices": "/filtration/vertices", "/witnesses": "/filtration/witnesses"}


class _Options(TypedDict):
    """The keyword arguments of ``dowker_size`` and ``dowker_diagrams``."""

    max_dim: int
    max_radius: float
    side: Side


def compute(
    payload: JobPayload, task: PersistenceTask, array: np.ndarray, steps: Steps
) -> Computed:
    """Dowker diagrams of labelled points' (n, d + 1) array, witness radii as values."""
    filtration = task.filtration
    if not isinstance(filtration, DowkerFiltration) or task.labelled is None:
        raise TypeError("a Dowker job needs a Dowker filtration on labelled points")
    classes = task.labelled.classes
    codes = array[:, -1].astype(np.int64)
    chosen = classes.index(filtration.vertices), classes.index(filtration.witnesses)
    vertices, witnesses = (array[codes == position, :-1] for position in chosen)
    options = _Options(
        max_dim=filtration.max_dim, max_radius=filtration.max_radius, side=filtration.side
    )
    steps.plan(2)
    steps.begin("size")
    with pointing_into("/filtration", _CLASSES):
        size = dowker_size(vertices, witnesses, **options)
    if size > payload.max_dowker_simplices:
        raise RequestError(
            f"the Dowker filtration would build about {size} candidate simplices, above the "
            f"limit of {payload.max_dowker_simplices}; lower max_radius or max_dim",
            field="/filtration/max_radius",
        )
    steps.begin("persistence")  # complex and reduction: one call, no progress inside
    with pointing_into("/filtration", _CLASSES):
        found = dowker_diagrams(vertices, witnesses, **options)
    fields = labelled_fields(codes, task.labelled, set(chosen))
    fields["dowker"] = {
        "vertices": filtration.vertices,
        "witnesses": filtration.witnesses,
        "side_used": found.side_used,
        "simplex_count": found.simplex_count,
    }
    return Computed(
        sets=[DiagramSet(dict(enumerate(found.diagrams)))],
        convention="witness_radius",
        coordinate_units=payload.input.units,
        engine="dowker-witness-float64",
        limit_pointer="/filtration/max_radius",
        advice="lower max_radius or max_dim",
        fields=fields,
    )


def runs_inline(payload: JobPayload) -> bool:
    """Never: even a small Dowker complex may grow with max_radius."""
    return False
