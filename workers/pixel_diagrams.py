"""Diagrams of image and mask inputs: filtration values from the spec, then the cubical engine.

The glue between ``workers.spec`` and ``workers.core`` for arrays: every filtration ends as one
float64 value per pixel, and every value array goes through the same cubical complex (pixels
as top-dimensional cells), so the cell convention is the same for all of them.
"""

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from workers.core.cubical import cubical_diagrams
from workers.core.mask_filtrations import heights, radial_distances, signed_distance
from workers.spec.filtrations import (
    ArrayFiltration,
    CubicalFiltration,
    DistanceFiltration,
    HeightFiltration,
    RadialFiltration,
)
from workers.spec.pixels import max_dim_of
from workers.spec.results import ValueConvention

__all__ = ["DiagramSet", "pixel_diagram_sets"]


@dataclass(frozen=True)
class DiagramSet:
    """Diagrams (dimension -> (k, 2) pairs) of one filtration, and its direction if it has
    one of several."""

    diagrams: dict[int, np.ndarray]
    direction: list[float] | None = None


def pixel_diagram_sets(
    array: np.ndarray, filtration: ArrayFiltration, spacing: Sequence[float] | None
) -> tuple[list[DiagramSet], ValueConvention]:
    """The diagram sets of ``filtration`` on an image or mask ``array`` (one set, or one per
    direction of a height filtration with ``directions``) and what their values are."""
    values = np.asarray(array, dtype=np.float64)  # before any negation: no integer wrap-around
    steps = list(spacing) if spacing is not None else [1.0] * values.ndim
    max_dim = max_dim_of(filtration, values.ndim)

    def diagrams_of(filtration_values: np.ndarray) -> dict[int, np.ndarray]:
        return dict(enumerate(cubical_diagrams(filtration_values, max_dim=max_dim)))

    if isinstance(filtration, CubicalFiltration):
        if filtration.direction == "superlevel":
            return [DiagramSet(diagrams_of(-values))], "negated_pixel_value"
        return [DiagramSet(diagrams_of(values))], "pixel_value"
    if isinstance(filtration, DistanceFiltration):
        return [DiagramSet(diagrams_of(signed_distance(values, steps)))], "signed_distance"
    if isinstance(filtration, RadialFiltration):
        radial = radial_distances(values, steps, filtration.center)
        return [DiagramSet(diagrams_of(radial))], "radial_distance"
    if isinstance(filtration, HeightFiltration):
        units = filtration.unit_directions()
        several = filtration.directions is not None
        sets = [
            DiagramSet(diagrams_of(heights(values, steps, unit)), unit if several else None)
            for unit in units
        ]
        return sets, "height"
    raise TypeError(f"not an array filtration: {type(filtration).__name__}")
