"""Synthetic data and small helpers shared by tests and benchmarks."""

import math
import socket

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


def free_port() -> int:
    """A TCP port on 127.0.0.1 that nothing listens on right now."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])
