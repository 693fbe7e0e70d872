"""Vietoris-Rips persistence of a finite point set in R^d.

Filtration values are **edge lengths** (the diameter convention): a simplex enters at the
largest Euclidean distance between two of its vertices. The ball-radius convention, used in
some texts, is exactly half of these values.

Arithmetic: distances are computed in float64, the persistence itself in float32 by ripser
(Bauer 2021, "Ripser: efficient computation of Vietoris-Rips persistence barcodes"), so
values carry a relative error of about 1e-7.
"""

import numpy as np
from ripser import ripser
from scipy.spatial.distance import pdist, squareform

from workers.core.diagrams import drop_empty_bars, sort_pairs
from workers.core.errors import InvalidArrayError, ParameterError

__all__ = ["rips_diagrams", "MAX_DIM"]

MAX_DIM = 2
"""Highest homology dimension: H2 (cavities) is already costly beyond a few hundred points."""


def rips_diagrams(
    points: np.ndarray, *, max_dim: int = 1, max_edge: float | None = None
) -> list[np.ndarray]:
    """Persistence diagrams of the Rips filtration of ``points``.

    points: (n, d) float64, finite, n >= 1.
    max_dim: diagrams for dimensions 0..max_dim are returned.
    max_edge: stop the filtration at this edge length (classes alive there get death inf);
        None runs the whole filtration.
    Returns: ``max_dim + 1`` arrays of shape (k, 2), float64, sorted by (birth, death),
        zero-length bars removed, essential classes with death ``np.inf``.
    """
    points = np.asarray(points, dtype=np.float64)
    if points.ndim != 2 or points.shape[0] < 1 or points.shape[1] < 1:
        raise InvalidArrayError("points must be a non-empty (n, d) array", field="/input/points")
    if not np.isfinite(points).all():
        raise InvalidArrayError("points must be finite", field="/input/points")
    if not 0 <= max_dim <= MAX_DIM:
        raise ParameterError(f"max_dim must be in 0..{MAX_DIM}", field="/filtration/max_dim")
    if max_edge is not None and not max_edge >= 0:
        raise ParameterError("max_edge must be >= 0", field="/filtration/max_edge")
    threshold = np.inf if max_edge is None else float(max_edge)
    # A precomputed matrix: ripser would otherwise guess (and warn) when n <= d.
    distances = squareform(pdist(points))
    raw = ripser(distances, maxdim=max_dim, thresh=threshold, distance_matrix=True)["dgms"]
    return [sort_pairs(drop_empty_bars(d)) for d in raw]
