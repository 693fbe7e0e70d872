"""Point-set jobs: the Rips filtration, on a subsample when the task asks for one; for
labelled points on the population the filtration names (all points without one)."""

import numpy as np

from workers import defaults
from workers.core.errors import pointing_into
from workers.core.rips import rips_diagrams
from workers.core.subsample import maxmin_subsample, random_subsample
from workers.jobs.results import Computed, DiagramSet
from workers.jobs.steps import Steps
from workers.spec import JobPayload, PersistenceTask, RipsFiltration
from workers.spec.jobs import LabelledLayout

__all__ = ["compute", "labelled_fields", "runs_inline"]

_POINTS = {"/points": "/input/points"}


def compute(
    payload: JobPayload, task: PersistenceTask, array: np.ndarray, steps: Steps
) -> Computed:
    """Rips diagrams of the (n, d) points, edge lengths as values; of labelled points'
    (n, d + 1) array, those of the population's points (every point without one)."""
    filtration = task.filtration
    if not isinstance(filtration, RipsFiltration):
        raise TypeError("a point-set job needs a Rips filtration")
    points = array
    rows: np.ndarray | None = None
    fields: dict[str, object] = {}
    if task.labelled is not None:
        points, rows, fields = _population(array, task.labelled, filtration.population)
    provenance: dict[str, object] = {}
    steps.plan(1 if filtration.subsample is None else 2)
    if filtration.subsample is not None:
        steps.begin("subsample")
        choose = maxmin_subsample if filtration.subsample.method == "maxmin" else random_subsample
        with pointing_into("/filtration/subsample", _POINTS):
            sample = choose(points, size=filtration.subsample.size, seed=filtration.subsample.seed)
        points = points[sample.indices]
        kept = sample.indices if rows is None else rows[sample.indices]  # rows of the input
        provenance = {
            "subsample_indices": kept.tolist(),
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
        fields=fields,
        provenance=provenance,
    )


def _population(
    array: np.ndarray, layout: LabelledLayout, population: str | None
) -> tuple[np.ndarray, np.ndarray, dict[str, object]]:
    """The coordinates of the points of ``population`` (all without one), their rows in the
    input, and the result's fields (``labelled_fields``)."""
    codes = array[:, -1].astype(np.int64)
    chosen = None if population is None else layout.classes.index(population)
    rows = np.arange(len(array)) if chosen is None else np.flatnonzero(codes == chosen)
    computed = set(range(len(layout.classes))) if chosen is None else {chosen}
    return array[rows, :-1], rows, labelled_fields(codes, layout, computed)


def labelled_fields(
    codes: np.ndarray, layout: LabelledLayout, computed: set[int]
) -> dict[str, object]:
    """The result's fields of a labelled points job: the count of each class and whether it
    is among the ``computed`` class positions, and how many points are polygon centroids."""
    counts = np.bincount(codes, minlength=len(layout.classes))
    fields: dict[str, object] = {
        "populations": [
            {"name": name, "count": int(count), "computed": position in computed}
            for position, (name, count) in enumerate(zip(layout.classes, counts, strict=True))
        ]
    }
    if layout.centroids:
        fields["warnings"] = [
            {
                "pointer": "/data",
                "message": f"{layout.centroids} polygon features were taken at their "
                "centroid (shapely), one point each",
            }
        ]
    return fields


def runs_inline(payload: JobPayload) -> bool:
    task = payload.task
    if not isinstance(task, PersistenceTask) or not isinstance(task.filtration, RipsFiltration):
        return False
    return (
        payload.input.shape[0] <= defaults.INLINE_MAX_POINTS
        and task.filtration.max_dim <= 1
        and task.filtration.subsample is None
    )
