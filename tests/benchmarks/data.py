"""Synthetic point sets of the benchmark: the two families the engine is judged on."""

import numpy as np


def uniform(n: int, dim: int, seed: int) -> np.ndarray:
    """n points uniform in the unit square (dim 2) or cube (dim 3)."""
    return np.random.default_rng(seed).uniform(size=(n, dim))


def noisy_circle(n: int, seed: int, noise: float = 0.05) -> np.ndarray:
    """n points at uniform angles on the unit circle plus Gaussian noise (sd ``noise``)."""
    rng = np.random.default_rng(seed)
    angles = rng.uniform(0, 2 * np.pi, n)
    return np.column_stack([np.cos(angles), np.sin(angles)]) + rng.normal(scale=noise, size=(n, 2))


FAMILIES = {
    "uniform square": lambda n, seed: uniform(n, 2, seed),
    "uniform cube": lambda n, seed: uniform(n, 3, seed),
    "noisy circle": noisy_circle,
}
