"""Synthetic data shared by tests and benchmarks."""

import math

import numpy as np


def uniform(n: int, dim: int, seed: int) -> np.ndarray:
    """n points uniform in the unit square (dim 2) or cube (dim 3)."""
    return np.random.default_rng(seed).uniform(size=(n, dim))


def noisy_circle(n: int, seed: int, radius: float = 1.0, noise: float = 0.05) -> np.ndarray:
    """n points at uniform angles on a circle plus Gaussian noise (sd ``noise``)."""
    rng = np.random.default_rng(seed)
    angles = rng.uniform(0, 2 * np.pi, n)
    circle = radius * np.column_stack([np.cos(angles), np.sin(angles)])
    return circle + rng.normal(scale=noise, size=(n, 2))


HEXAGON = [[math.cos(k * math.pi / 3), math.sin(k * math.pi / 3)] for k in range(6)]
"""Regular hexagon of circumradius 1 (side 1), as JSON-ready lists."""

FAMILIES = {
    "uniform square": lambda n, seed: uniform(n, 2, seed),
    "uniform cube": lambda n, seed: uniform(n, 3, seed),
    "noisy circle": lambda n, seed: noisy_circle(n, seed),
}
"""The data families the Rips benchmark is judged on."""


def smooth_field(shape: tuple[int, ...], sigma: float, seed: int) -> np.ndarray:
    """Gaussian-smoothed white noise (a stand-in for a stained tissue image), float64."""
    from scipy.ndimage import gaussian_filter

    rng = np.random.default_rng(seed)
    field: np.ndarray = gaussian_filter(rng.standard_normal(shape), sigma)
    return field


def ring_mask(
    shape: tuple[int, ...],
    center: tuple[float, ...],
    inner: float,
    outer: float,
    spacing: tuple[float, ...] | None = None,
) -> np.ndarray:
    """Pixels whose centre (index * spacing) lies at distance in [inner, outer] from
    ``center``: an annulus in 2D (a vessel wall around its lumen), a hollow shell in 3D."""
    steps = spacing or (1.0,) * len(shape)
    grids = np.meshgrid(
        *[np.arange(n) * s - c for n, s, c in zip(shape, steps, center, strict=True)],
        indexing="ij",
    )
    radius = np.sqrt(sum(g * g for g in grids))
    mask: np.ndarray = (radius >= inner) & (radius <= outer)
    return mask


def cell_blobs(shape: tuple[int, int], count: int, radius: float, seed: int) -> np.ndarray:
    """A binary mask of ``count`` round cells of about ``radius`` pixels at random places;
    touching cells merge, as they do in a segmented crowded field."""
    rng = np.random.default_rng(seed)
    rows, cols = np.indices(shape)
    mask = np.zeros(shape, dtype=bool)
    for _ in range(count):
        r, c = rng.uniform(0, shape[0]), rng.uniform(0, shape[1])
        size = radius * rng.uniform(0.6, 1.4)
        mask |= (rows - r) ** 2 + (cols - c) ** 2 <= size * size
    return mask
