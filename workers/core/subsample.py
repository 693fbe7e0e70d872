"""Subsampling of point sets before a Rips filtration.

- ``maxmin_subsample``: greedy furthest-point sampling (Gonzalez 1985, "Clustering to minimize
  the maximum intercluster distance"): start from a seeded random point, then repeatedly add
  the point furthest from the points already chosen. Its covering radius
  ``max_x min_s |x - s|`` is exactly the Hausdorff distance between the sample and the full
  set, and Gonzalez's argument bounds it by twice the optimal K-centre radius.
- ``random_subsample``: K distinct indices drawn uniformly, reproducible from ``seed``.

Both return indices into the input, so a client can map a sample back to its own rows.
"""

from dataclasses import dataclass

import numpy as np

from workers.core.errors import ParameterError

__all__ = ["Sample", "maxmin_subsample", "random_subsample"]


@dataclass(frozen=True)
class Sample:
    """Chosen rows of the input and how well they cover it.

    indices: (K,) int64, positions in the input, in the order they were chosen (maxmin) or
        ascending (random).
    covering_radius: Hausdorff distance from the sample to the full set, same units as the
        points (Euclidean).
    """

    indices: np.ndarray
    covering_radius: float


def _check_size(n: int, size: int) -> None:
    if not 1 <= size <= n:
        raise ParameterError(
            f"subsample size must be between 1 and the number of points ({n}), got {size}",
            field="/size",
        )


def maxmin_subsample(points: np.ndarray, *, size: int, seed: int = 0) -> Sample:
    """Greedy furthest-point sample of ``size`` rows of ``points`` (n, d) float64.

    The first point is drawn with ``np.random.default_rng(seed)``; ties in the furthest
    distance go to the lowest index (``np.argmax``), so the result is a pure function of
    (points, size, seed). Costs O(n * size * d) time and O(n) extra memory.
    """
    n = points.shape[0]
    _check_size(n, size)
    first = int(np.random.default_rng(seed).integers(n))
    chosen = np.empty(size, dtype=np.int64)
    chosen[0] = first
    nearest = np.sqrt(((points - points[first]) ** 2).sum(axis=1))
    for k in range(1, size):
        nxt = int(np.argmax(nearest))
        chosen[k] = nxt
        np.minimum(nearest, np.sqrt(((points - points[nxt]) ** 2).sum(axis=1)), out=nearest)
    return Sample(indices=chosen, covering_radius=float(nearest.max()))


def random_subsample(points: np.ndarray, *, size: int, seed: int = 0) -> Sample:
    """``size`` distinct rows drawn uniformly without replacement, ascending indices."""
    n = points.shape[0]
    _check_size(n, size)
    rng = np.random.default_rng(seed)
    chosen = np.sort(rng.choice(n, size=size, replace=False)).astype(np.int64)
    return Sample(indices=chosen, covering_radius=_covering_radius(points, chosen))


def _covering_radius(points: np.ndarray, chosen: np.ndarray) -> float:
    """max over all rows of the distance to the nearest chosen row, in blocks to bound memory."""
    sample = points[chosen]
    # about 2**22 float64 differences (32 MiB) per block
    block = max(1, (1 << 22) // (sample.shape[0] * points.shape[1]))
    worst = 0.0
    for start in range(0, points.shape[0], block):
        part = points[start : start + block]
        d2 = ((part[:, None, :] - sample[None, :, :]) ** 2).sum(axis=2)
        worst = max(worst, float(np.sqrt(d2.min(axis=1)).max()))
    return worst
