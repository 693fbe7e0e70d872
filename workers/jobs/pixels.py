"""Image and mask jobs: filtration values from the spec, then the cubical engine.

The glue between ``workers.spec`` and ``workers.core`` for arrays: every filtration ends as one
float64 value per pixel, and every value array goes through the same cubical complex (pixels
as top-dimensional cells), so the cell convention is the same for all of them.
"""

import math
from collections.abc import Sequence

import numpy as np

from workers import defaults
from workers.core.cubical import cubical_diagrams
from workers.core.errors import pointing_into
from workers.core.mask_filtrations import heights, radial_distances, signed_distance
from workers.jobs.results import Computed, DiagramSet
from workers.jobs.steps import Steps, ignore, of_direction
from workers.spec import JobPayload, PersistenceTask
from workers.spec.filtrations import (
    ArrayFiltration,
    CubicalFiltration,
    DistanceFiltration,
    HeightFiltration,
    RadialFiltration,
)
from workers.spec.kinds.pixels import max_dim_of
from workers.spec.results import ValueConvention

__all__ = ["compute", "pixel_diagram_sets", "runs_inline"]


def pixel_diagram_sets(
    array: np.ndarray,
    filtration: ArrayFiltration,
    spacing: Sequence[float] | None,
    progress: Steps | None = None,
) -> tuple[list[DiagramSet], ValueConvention]:
    """The diagram sets of ``filtration`` on an image or mask ``array`` (one set, or one per
    direction of a height filtration with ``directions``) and what their values are; the
    filtration values and each persistence are steps of ``progress``."""
    values = np.asarray(array, dtype=np.float64)  # before any negation: no integer wrap-around
    steps = list(spacing) if spacing is not None else [1.0] * values.ndim
    max_dim = max_dim_of(filtration, values.ndim)
    progress = progress or Steps(ignore)

    def diagrams_of(
        filtration_values: np.ndarray, stage: str = "persistence"
    ) -> dict[int, np.ndarray]:
        progress.begin(stage)
        return dict(enumerate(cubical_diagrams(filtration_values, max_dim=max_dim)))

    if isinstance(filtration, CubicalFiltration):
        progress.plan(1)  # the values are the pixels'
        if filtration.direction == "superlevel":
            return [DiagramSet(diagrams_of(-values))], "negated_pixel_value"
        return [DiagramSet(diagrams_of(values))], "pixel_value"
    if isinstance(filtration, DistanceFiltration):
        progress.plan(2)
        progress.begin("signed distance")
        return [DiagramSet(diagrams_of(signed_distance(values, steps)))], "signed_distance"
    if isinstance(filtration, RadialFiltration):
        progress.plan(2)
        progress.begin("radial distance")
        radial = radial_distances(values, steps, filtration.center)
        return [DiagramSet(diagrams_of(radial))], "radial_distance"
    if isinstance(filtration, HeightFiltration):
        units = filtration.unit_directions()
        count = len(units) if filtration.directions is not None else None
        progress.plan(2 * len(units))
        sets = []
        for index, unit in enumerate(units):
            progress.begin(of_direction("heights", index, count))
            height = heights(values, steps, unit)
            diagrams = diagrams_of(height, of_direction("persistence", index, count))
            sets.append(DiagramSet(diagrams, unit if count is not None else None))
        return sets, "height"
    raise TypeError(f"not an array filtration: {type(filtration).__name__}")


def compute(
    payload: JobPayload, task: PersistenceTask, array: np.ndarray, steps: Steps
) -> Computed:
    filtration = task.filtration
    if not isinstance(filtration, ArrayFiltration):
        raise TypeError("an image or mask job needs an array filtration")
    with pointing_into("/filtration"):
        sets, convention = pixel_diagram_sets(array, filtration, task.spacing, steps)
    return Computed(
        sets=sets,
        convention=convention,
        # The pixel grid is in the unit of spacing, or in pixels without it.
        coordinate_units=payload.input.units if task.spacing is not None else "pixel",
        engine="cubical-lacuna-c",
        spacing=task.spacing,
        limit_pointer="/filtration",
        advice="lower max_dim, smooth the image or send a smaller region",
    )


def runs_inline(payload: JobPayload) -> bool:
    return math.prod(payload.input.shape) <= defaults.INLINE_MAX_PIXELS
