"""Persistence images (Adams et al. 2017, "Persistence images: a stable vector representation
of persistent homology", JMLR 18(8)).

A diagram is moved to birth-persistence coordinates (b, p = d - b). Each point carries a weight
w(p) and an isotropic Gaussian of standard deviation ``sigma`` centred on it; a pixel's value is
the integral of the weighted sum of Gaussians over the pixel, not a sample at its centre.

The Gaussian is separable, so over a pixel [x0, x1] x [y0, y1] the integral of one point is

    w * (Phi((x1 - b) / sigma) - Phi((x0 - b) / sigma))
      * (Phi((y1 - p) / sigma) - Phi((y0 - p) / sigma))

with Phi the standard normal CDF, Phi(z) = (1 + erf(z / sqrt 2)) / 2. A whole image is then one
matrix product: (births x pixel columns)^T @ (persistences x pixel rows), and a batch of
images is one batched product.

Grid: ``resolution = (nx, ny)`` pixels of equal size cover ``birth_range`` x
``persistence_range`` exactly (no padding, no fitting to the data). The image has shape
(nx, ny): row i is the i-th birth interval, column j the j-th persistence interval.

Points with zero persistence are left out, so they contribute nothing whatever the weight.
"""

from collections.abc import Sequence
from typing import Literal

import numpy as np
from scipy.special import erf

from workers.core.errors import ParameterError

__all__ = ["persistence_images", "point_weights", "Weight"]

Weight = Literal["linear", "constant", "power"]
"""linear: w = min(p / max_persistence, 1); constant: w = 1; power: w = p ** exponent."""

_CHUNK = 8192
"""Points per block of erf evaluations: keeps each block's arrays in cache."""


def point_weights(
    persistence: np.ndarray,
    weight: Weight,
    *,
    max_persistence: float | None = None,
    exponent: float | None = None,
) -> np.ndarray:
    """Weight of each point from its persistence (k,), as named by ``weight``."""
    if weight == "linear":
        if max_persistence is None or not max_persistence > 0:
            raise ParameterError("linear weight needs max_persistence > 0", field="/weight")
        return np.minimum(persistence / max_persistence, 1.0)
    if weight == "constant":
        return np.ones_like(persistence)
    if weight == "power":
        if exponent is None or not exponent > 0:
            raise ParameterError("power weight needs exponent > 0", field="/weight")
        return persistence**exponent
    raise ParameterError(f"unknown weight {weight!r}", field="/weight")


SATURATION = 8.5
"""erf(z / sqrt 2) is exactly +-1.0 in float64 once |z| > 8.5 (erfc(6.01) < 1e-16)."""


def _cdf_steps(centres: np.ndarray, edges: np.ndarray, sigma: float, out: np.ndarray) -> None:
    """Write erf((edges - c) / (sigma sqrt 2)) differences, twice each interval's mass, in ``out``.

    The mass of N(c, sigma^2) between consecutive edges is half of each value; the caller
    folds that factor into the weights. Only the edges within SATURATION sigma of a centre
    need erf; beyond them it is exactly -1 or +1, so when that window is under half the
    grid, erf is evaluated on the window only (same values, fewer evaluations; a wider window
    saves too little to pay for the bookkeeping).
    """
    scale = 1.0 / (sigma * np.sqrt(2.0))
    step = edges[1] - edges[0]
    reach = 2 * SATURATION * sigma / step + 2  # edges within SATURATION sigma, at most
    if not reach * 2 <= edges.size:  # also when it overflows to inf or nan
        z = edges[None, :] - centres[:, None]
        z *= scale
        erf(z, out=z)
        np.subtract(z[:, 1:], z[:, :-1], out=out)
        return
    width = int(np.ceil(reach))
    first = np.floor((centres - SATURATION * sigma - edges[0]) / step).astype(np.int64)
    np.clip(first, 0, edges.size - width, out=first)
    window = first[:, None] + np.arange(width)
    near = edges[window] - centres[:, None]
    near *= scale
    erf(near, out=near)
    cdf = np.where(np.arange(edges.size)[None, :] < first[:, None], -1.0, 1.0)
    np.put_along_axis(cdf, window, near, axis=1)
    np.subtract(cdf[:, 1:], cdf[:, :-1], out=out)


def persistence_images(
    diagrams: Sequence[np.ndarray],
    *,
    birth_range: tuple[float, float],
    persistence_range: tuple[float, float],
    resolution: tuple[int, int],
    sigma: float,
    weight: Weight = "linear",
    max_persistence: float | None = None,
    exponent: float | None = None,
) -> np.ndarray:
    """Persistence images of ``diagrams``, each a (k, 2) array of finite (birth, death).

    Returns (len(diagrams), nx, ny) float64. ``sigma`` is in the units of the diagram values.
    Points are taken a block at a time, so memory is bounded by the block and the images,
    whatever the number of points.
    """
    nx, ny = resolution
    if nx < 1 or ny < 1:
        raise ParameterError("resolution must be at least 1 x 1", field="/resolution")
    if not sigma > 0:
        raise ParameterError("sigma must be > 0", field="/sigma")
    birth_edges = _edges(birth_range, nx, "birth_range")
    persistence_edges = _edges(persistence_range, ny, "persistence_range")
    if not np.isfinite(1.0 / sigma):
        raise ParameterError("sigma is too small for float64", field="/sigma")

    kept = []
    for pairs in diagrams:
        pairs = np.asarray(pairs, dtype=np.float64).reshape(-1, 2)
        if not np.isfinite(pairs).all():
            raise ParameterError("persistence images need finite deaths", field="/diagrams")
        kept.append(pairs[pairs[:, 1] > pairs[:, 0]])
    offsets = np.concatenate([[0], np.cumsum([len(pairs) for pairs in kept])]).astype(np.int64)
    points = np.concatenate(kept) if kept else np.empty((0, 2))
    images = np.zeros((len(kept), nx, ny))
    for start in range(0, len(points), _CHUNK):
        block = points[start : start + _CHUNK]
        persistence = block[:, 1] - block[:, 0]
        along_birth = np.empty((len(block), nx))
        along_persistence = np.empty((len(block), ny))
        _cdf_steps(block[:, 0], birth_edges, sigma, along_birth)
        _cdf_steps(persistence, persistence_edges, sigma, along_persistence)
        # 0.25: each axis's erf differences are twice the Gaussian mass (see _cdf_steps).
        along_birth *= (
            0.25
            * point_weights(
                persistence, weight, max_persistence=max_persistence, exponent=exponent
            )[:, None]
        )
        # Each diagram whose points fall in this block adds its share: A^T @ B.
        first = int(np.searchsorted(offsets, start, side="right")) - 1
        stop = start + len(block)
        for index in range(first, len(kept)):
            low, high = max(offsets[index], start), min(offsets[index + 1], stop)
            if low >= stop:
                break
            rows = slice(low - start, high - start)
            images[index] += along_birth[rows].T @ along_persistence[rows]
    return images


def _edges(bounds: tuple[float, float], pixels: int, name: str) -> np.ndarray:
    """pixels + 1 evenly spaced edges from bounds[0] to bounds[1], strictly increasing;
    ``name``: the argument ``bounds`` came as."""
    edges = np.linspace(bounds[0], bounds[1], pixels + 1)
    if not np.isfinite(edges).all() or not (np.diff(edges) > 0).all():
        raise ParameterError(
            f"{name} must be increasing and wide enough for {pixels} distinct pixels",
            field=f"/{name}",
        )
    return edges
