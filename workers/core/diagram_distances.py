"""Distances between whole persistence diagrams, classes that never die included, and between
feature vectors.

Essential classes (death inf) are matched only to essential classes, never to the diagonal or
to finite points: sorted births against sorted births, which is optimal on a line for every
order (common practice). Two diagrams with different numbers of essential classes are at
distance inf. The essential part adds to each metric as its own formula would:

- bottleneck: max(d_B(finite parts), largest birth gap);
- wasserstein: (W_p(finite parts)^p + sum of gap^p)^(1/p);
- sliced_wasserstein: SW(finite parts) + sum of gaps (the 1-Wasserstein distance of the
  births on the line).

Or, as ``DiagramMetric.never_dying`` asks, essential classes are dropped from both diagrams
before matching, or capped: a death inf becomes max(birth, cap), the ``"infinite": "cap"``
of the feature specs (``workers.core.diagrams.finite_part``), and the capped classes are
matched like any finite point, to points or to the diagonal. Either way every distance is
finite.
"""

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np
from scipy.spatial.distance import pdist, squareform

from workers.core.bottleneck import bottleneck_distance
from workers.core.diagrams import InfiniteDeaths, checked_diagram, finite_part, split_essential
from workers.core.errors import ParameterError
from workers.core.sliced_wasserstein import sliced_wasserstein_distance
from workers.core.wasserstein import wasserstein_distance

__all__ = [
    "DiagramMetric",
    "NeverDyingMode",
    "VectorMetric",
    "diagram_distance",
    "distances_for_pairs",
    "essential_counts",
    "vector_distance_matrix",
]

VectorMetric = Literal["euclidean", "cosine"]

NeverDyingMode = Literal["separate", "drop", "cap"]
"""How a diagram distance treats classes with death inf (see the module docstring)."""


@dataclass(frozen=True)
class DiagramMetric:
    """A distance between diagrams: ``name`` and the parameters it takes.

    order: the p of wasserstein (>= 1); directions: the number of angles of
    sliced_wasserstein; never_dying: classes with death inf matched only to each other
    (``separate``), left out (``drop``) or ended at ``max(birth, cap)`` (``cap``).
    """

    name: Literal["bottleneck", "wasserstein", "sliced_wasserstein"]
    order: float = 1.0
    directions: int = 50
    never_dying: NeverDyingMode = "separate"
    cap: float | None = None


def essential_counts(diagrams: Sequence[np.ndarray]) -> np.ndarray:
    """Number of classes with death inf in each diagram (len(diagrams),)."""
    return np.array([int(np.isinf(np.asarray(d)[:, 1]).sum()) for d in diagrams])


def diagram_distance(a: np.ndarray, b: np.ndarray, metric: DiagramMetric) -> float:
    """Distance between diagrams a (n, 2) and b (m, 2); deaths may be inf."""
    if metric.never_dying == "separate":
        finite_a, essential_a = split_essential(checked_diagram(a))
        finite_b, essential_b = split_essential(checked_diagram(b))
    else:
        if metric.never_dying == "cap" and (metric.cap is None or not np.isfinite(metric.cap)):
            raise ParameterError('never_dying mode "cap" needs a finite cap', field="/metric")
        infinite: InfiniteDeaths = "drop" if metric.never_dying == "drop" else "cap"
        finite_a = finite_part(a, infinite, metric.cap)
        finite_b = finite_part(b, infinite, metric.cap)
        essential_a = essential_b = np.empty(0)
    if len(essential_a) != len(essential_b):
        return float("inf")
    gaps = np.abs(np.sort(essential_a) - np.sort(essential_b))
    if metric.name == "bottleneck":
        return max(bottleneck_distance(finite_a, finite_b), float(gaps.max(initial=0.0)))
    if metric.name == "wasserstein":
        finite = wasserstein_distance(finite_a, finite_b, order=metric.order)
        # In units of the largest part, as the finite part itself is computed: the parts
        # raised to the order neither overflow nor underflow.
        unit = max(finite, float(gaps.max(initial=0.0)))
        if unit == 0.0:
            return 0.0
        parts = (finite / unit) ** metric.order + ((gaps / unit) ** metric.order).sum()
        return unit * float(parts ** (1 / metric.order))
    if metric.name == "sliced_wasserstein":
        finite = sliced_wasserstein_distance(finite_a, finite_b, directions=metric.directions)
        return finite + float(gaps.sum())
    raise ParameterError(f"unknown metric {metric.name!r}", field="/metric")


def distances_for_pairs(
    diagrams: Sequence[np.ndarray], rows: np.ndarray, cols: np.ndarray, metric: DiagramMetric
) -> np.ndarray:
    """diagram_distance(diagrams[rows[k]], diagrams[cols[k]]) for each k: (len(rows),)."""
    return np.array(
        [
            diagram_distance(diagrams[i], diagrams[j], metric)
            for i, j in zip(rows, cols, strict=True)
        ],
        dtype=np.float64,
    )


def vector_distance_matrix(vectors: np.ndarray, metric: VectorMetric) -> np.ndarray:
    """Pairwise distances between the rows of ``vectors`` (N, L): (N, N), zero diagonal.

    euclidean: ||x - y||_2 (scipy's pdist). cosine: 1 - <x, y> / (||x|| ||y||); NaN where a
    row is all zeros, for which no angle exists.
    """
    vectors = np.asarray(vectors, dtype=np.float64)
    if metric == "euclidean":
        matrix: np.ndarray = squareform(pdist(vectors, "euclidean"))
        return matrix
    if metric == "cosine":
        # Each row over its largest entry first: the norm of a tiny row would underflow to 0.
        largest = np.abs(vectors).max(axis=1)
        zero = largest == 0
        scaled = vectors / np.where(zero, 1.0, largest)[:, None]
        unit = scaled / np.where(zero, 1.0, np.linalg.norm(scaled, axis=1))[:, None]
        matrix = np.clip(1.0 - unit @ unit.T, 0.0, 2.0)
        matrix[zero, :] = np.nan
        matrix[:, zero] = np.nan
        np.fill_diagonal(matrix, 0.0)
        return matrix
    raise ParameterError(f"unknown metric {metric!r}", field="/metric")
