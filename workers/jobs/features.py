"""Feature specs applied to diagrams: the glue between ``workers.spec`` and ``workers.core``."""

from collections.abc import Callable, Mapping, Sequence

import numpy as np

from workers.core.betti_curve import betti_curve
from workers.core.diagrams import finite_part
from workers.core.errors import RequestError, pointing_into
from workers.core.landscape import landscape, sample_grid
from workers.core.persistence_image import persistence_images
from workers.core.summary import summary, summary_names
from workers.spec.arrays import canonical_sha256
from workers.spec.features import (
    BettiCurveSpec,
    FeatureSpec,
    LandscapeSpec,
    LinearWeight,
    PersistenceImageSpec,
    PowerWeight,
    SummarySpec,
    spec_id_of,
    vector_shape,
)
from workers.spec.results import FeatureVector, LayoutEntry

__all__ = ["direction_feature_vectors", "feature_values", "feature_vectors", "layout_id_of"]

Step = Callable[[], None]
"""Called as each feature vector begins (a step of the job's progress)."""


def feature_values(spec: FeatureSpec, pairs: np.ndarray) -> np.ndarray:
    """The values of ``spec`` on one diagram (k, 2) with inf deaths, shaped as the spec says."""
    finite = finite_part(pairs, spec.infinite, spec.cap)
    if isinstance(spec, PersistenceImageSpec):
        weight = spec.weight
        image: np.ndarray = persistence_images(
            [finite],
            birth_range=spec.birth_range,
            persistence_range=spec.persistence_range,
            resolution=spec.resolution,
            sigma=spec.sigma,
            weight=weight.type,
            max_persistence=weight.max_persistence if isinstance(weight, LinearWeight) else None,
            exponent=weight.exponent if isinstance(weight, PowerWeight) else None,
        )[0]
        return image
    if isinstance(spec, LandscapeSpec):
        return landscape(finite, levels=spec.levels, grid=sample_grid(spec.t_range, spec.samples))
    if isinstance(spec, BettiCurveSpec):
        return betti_curve(finite, grid=sample_grid(spec.t_range, spec.samples))
    if isinstance(spec, SummarySpec):
        return summary(finite, order=spec.order, quantiles=spec.quantiles)
    raise TypeError(f"not a feature spec: {type(spec).__name__}")


def layout_id_of(spec_ids: Sequence[str]) -> str:
    """SHA-256 of the JSON list of spec_ids: the identity of a concatenated vector's layout."""
    return canonical_sha256(list(spec_ids))


def feature_vectors(
    specs: Sequence[FeatureSpec], diagrams: Mapping[int, np.ndarray], step: Step
) -> tuple[list[FeatureVector], list[LayoutEntry], str | None]:
    """Vectors of ``specs`` on ``diagrams`` (dimension -> (k, 2)), their layout and its id;
    ``step`` is called before each."""
    vectors, layout = _vectors_of(specs, diagrams, direction=None, start=0, step=step)
    layout_id = layout_id_of([entry.spec_id for entry in layout]) if layout else None
    return vectors, layout, layout_id


def direction_feature_vectors(
    specs: Sequence[FeatureSpec],
    diagram_sets: Sequence[tuple[list[float], Mapping[int, np.ndarray]]],
    step: Step,
) -> tuple[list[FeatureVector], list[LayoutEntry], str | None]:
    """Vectors of ``specs`` on each (direction, diagrams) in turn, direction-major; ``step``
    is called before each.

    The layout id covers the unit directions too: vectors of other directions do not stack.
    """
    vectors: list[FeatureVector] = []
    layout: list[LayoutEntry] = []
    for index, (_, diagrams) in enumerate(diagram_sets):
        start = layout[-1].stop if layout else 0
        more_vectors, more_layout = _vectors_of(
            specs, diagrams, direction=index, start=start, step=step
        )
        vectors += more_vectors
        layout += more_layout
    if not layout:
        return vectors, layout, None
    layout_id = canonical_sha256(
        {
            "spec_ids": [spec.spec_id or spec_id_of(spec) for spec in specs],
            "directions": [direction for direction, _ in diagram_sets],
        }
    )
    return vectors, layout, layout_id


def _vectors_of(
    specs: Sequence[FeatureSpec],
    diagrams: Mapping[int, np.ndarray],
    direction: int | None,
    start: int,
    step: Step,
) -> tuple[list[FeatureVector], list[LayoutEntry]]:
    vectors: list[FeatureVector] = []
    layout: list[LayoutEntry] = []
    for index, spec in enumerate(specs):
        step()
        spec_id = spec.spec_id or spec_id_of(spec)
        where = f"/features/{index}"
        # The diagram argument stands for the spec's handling of classes that never die.
        never_dying = f"{where}/infinite"
        with pointing_into(where, {"/pairs": never_dying, "/diagrams": never_dying}):
            values = feature_values(spec, diagrams.get(spec.dim, np.empty((0, 2))))
        if not np.isfinite(values).all():  # JSON has no inf or NaN, and neither do vectors
            raise RequestError(
                "the values of this feature overflow float64 on this diagram; lower the "
                "exponent or order, or rescale the diagram",
                field=where,
            )
        vectors.append(
            FeatureVector(
                type=spec.type,
                dim=spec.dim,
                spec_id=spec_id,
                direction=direction,
                shape=vector_shape(spec),
                values=values.ravel().tolist(),
                labels=summary_names(spec.quantiles) if isinstance(spec, SummarySpec) else None,
            )
        )
        layout.append(
            LayoutEntry(
                type=spec.type,
                dim=spec.dim,
                spec_id=spec_id,
                direction=direction,
                start=start,
                stop=start + values.size,
            )
        )
        start += values.size
    return vectors, layout
