"""Cross-population scalars of a labelled point set: how near the cells of one class sit to
the cells of another.

For each ordered pair of distinct classes (A, B): the distance from every A cell to its
nearest B cell (Euclidean, by scipy.spatial.cKDTree), summarised by its first quartile,
median, third quartile and mean, and, for each radius r, the fraction of A cells with a B
cell within r. "Within" is the closed ball: a B cell at distance exactly r counts
(``distance <= r``). Quartiles are numpy.percentile's default (linear interpolation between
order statistics, method ``"linear"``).

The pair is ordered: (A, B) looks from A cells to B cells and is not (B, A) (one B cell
among many A cells is near some A cells, and every A cell near it is its only B).

Units: distances and radii are in the unit of the coordinates (micrometres for the demo
layouts). Counts are numbers of cells, fractions are in [0, 1].
"""

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.spatial import cKDTree

from workers.core.errors import InvalidArrayError, ParameterError

__all__ = ["MixingDescriptors", "NearestSummary", "mixing_descriptors"]


@dataclass(frozen=True)
class NearestSummary:
    """Distances from the cells of one class (A) to the nearest cell of another (B).

    ``first_quartile``, ``median``, ``third_quartile`` and ``mean`` of the nearest-B
    distances of the A cells; ``fraction_within[k]``: the fraction of A cells with a B cell at
    distance <= ``radii[k]`` (one value per radius, in the order of the radii).

    With no A cells every value is NaN (nothing to summarise). With no B cells the distances
    are NaN and every fraction is 0.0 (no A cell has a B cell within any radius); callers
    refuse such a pair before asking, this only keeps the function total.
    """

    first_quartile: float
    median: float
    third_quartile: float
    mean: float
    fraction_within: tuple[float, ...]


@dataclass(frozen=True)
class MixingDescriptors:
    """What ``mixing_descriptors`` answers.

    ``class_names``: the classes, in the order of the label codes; ``counts``: cells per
    class (a class with no cell counts 0); ``radii``: the radii of the fractions, as given;
    ``pairs[(a, b)]``: the ``NearestSummary`` from the cells of class ``a`` to those of class
    ``b``, for every ordered pair of distinct classes, in the order of ``class_names``.
    """

    class_names: tuple[str, ...]
    counts: dict[str, int]
    radii: tuple[float, ...]
    pairs: dict[tuple[str, str], NearestSummary]


def _checked_radii(radii: Sequence[float] | np.ndarray) -> np.ndarray:
    values = np.asarray(radii, dtype=np.float64)
    if values.ndim != 1 or values.size == 0:
        raise ParameterError("radii must be a non-empty list of lengths", field="/radii")
    for k, value in enumerate(values.tolist()):
        if not (np.isfinite(value) and value > 0):
            raise ParameterError(f"radii must be positive, not {value}", field=f"/radii/{k}")
        if k and not value > values[k - 1]:
            raise ParameterError(
                f"radii must increase, but {value} follows {values[k - 1]}", field=f"/radii/{k}"
            )
    return values


def _summary(distances: np.ndarray, radii: np.ndarray, sources: int) -> NearestSummary:
    """The summary of ``distances`` (one per source cell; empty when there is no target
    cell) over ``sources`` cells."""
    nan = float("nan")
    if sources == 0:
        return NearestSummary(nan, nan, nan, nan, tuple(nan for _ in radii))
    if distances.size == 0:
        return NearestSummary(nan, nan, nan, nan, tuple(0.0 for _ in radii))
    q1, median, q3 = np.percentile(distances, [25.0, 50.0, 75.0])  # method "linear"
    # Sorted distances: the count within r is the insertion point right of r (d <= r).
    within = np.searchsorted(np.sort(distances), radii, side="right") / sources
    return NearestSummary(
        float(q1), float(median), float(q3), float(distances.mean()), tuple(within.tolist())
    )


def mixing_descriptors(
    points: np.ndarray,
    labels: np.ndarray,
    class_names: Sequence[str],
    radii: Sequence[float] | np.ndarray,
) -> MixingDescriptors:
    """Counts per class and nearest-other-class distances of labelled cells.

    ``points``: (n, d) float coordinates, finite, n >= 1 and d >= 1; ``labels``: (n,)
    integer codes, ``labels[i]`` the class of ``points[i]`` as an index into
    ``class_names`` (0 <= code < len(class_names)); ``class_names``: distinct names, at least
    two; ``radii``: (m,) positive, strictly increasing lengths in the unit of the points.

    Returns a ``MixingDescriptors`` (see there and ``NearestSummary``; distances in the unit
    of the points, fractions over the cells of the first class of each pair, "within" meaning
    ``distance <= r``). A class of one cell is summarised over its one distance (all three
    quartiles and the mean equal it); an empty class gives NaN summaries as described in
    ``NearestSummary``, never an error.

    Raises InvalidArrayError for points or labels of the wrong shape, non-finite points or
    codes outside the classes, and ParameterError (``field`` = ``"/class_names"`` or
    ``"/radii/<k>"``) for fewer than two or repeated class names and radii that are not
    positive and increasing.
    """
    points = np.asarray(points, dtype=np.float64)
    if points.ndim != 2 or points.shape[0] == 0 or points.shape[1] == 0:
        raise InvalidArrayError("points must be a non-empty (n, d) array", field="/points")
    if not np.isfinite(points).all():
        raise InvalidArrayError("points must be finite", field="/points")
    names = tuple(class_names)
    if len(names) < 2 or len(set(names)) != len(names):
        raise ParameterError(
            "class_names must be at least two distinct names", field="/class_names"
        )
    codes = np.asarray(labels)
    if codes.shape != (points.shape[0],) or not np.issubdtype(codes.dtype, np.integer):
        raise InvalidArrayError(
            "labels must be one integer code per point, shape (n,)", field="/labels"
        )
    if codes.min() < 0 or codes.max() >= len(names):
        raise InvalidArrayError(
            f"labels must be codes 0..{len(names) - 1} of class_names", field="/labels"
        )
    radius_values = _checked_radii(radii)

    members = [points[codes == code] for code in range(len(names))]
    trees = [cKDTree(group) if len(group) else None for group in members]
    pairs = {}
    for a, sources in enumerate(members):
        for b, tree in enumerate(trees):
            if a == b:
                continue
            if tree is None or len(sources) == 0:
                distances = np.empty(0)
            else:
                distances = tree.query(sources, k=1)[0]
            pairs[(names[a], names[b])] = _summary(distances, radius_values, len(sources))
    return MixingDescriptors(
        class_names=names,
        counts={name: len(group) for name, group in zip(names, members, strict=True)},
        radii=tuple(radius_values.tolist()),
        pairs=pairs,
    )
