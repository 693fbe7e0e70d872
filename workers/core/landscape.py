"""Persistence landscapes (Bubenik 2015, "Statistical topological data analysis using
persistence landscapes", JMLR 16), sampled on a fixed grid.

Each finite pair (b, d) is a tent t -> max(0, min(t - b, d - t)); the k-th landscape function
lambda_k(t) is the k-th largest tent value at t (0 when fewer than k tents are positive).
Hence lambda_1 >= lambda_2 >= ... >= 0, each lambda_k is 1-Lipschitz, and one pair gives a
tent of height (d - b) / 2 at t = (b + d) / 2.
"""

import numpy as np

from workers.core.errors import ParameterError

__all__ = ["landscape", "sample_grid"]

_BLOCK = 1 << 21
"""Tent values computed per block (pairs x samples), to bound memory on large diagrams."""


def sample_grid(t_range: tuple[float, float], samples: int) -> np.ndarray:
    """``samples`` evenly spaced values from t_range[0] to t_range[1], both included."""
    low, high = t_range
    if not low < high:
        raise ParameterError("t_range must be increasing", field="/t_range")
    if samples < 2:
        raise ParameterError("samples must be at least 2", field="/samples")
    return np.linspace(low, high, samples)


def landscape(pairs: np.ndarray, *, levels: int, grid: np.ndarray) -> np.ndarray:
    """lambda_1..lambda_levels of finite ``pairs`` (k, 2) at each ``grid`` value: (levels, s)."""
    if levels < 1:
        raise ParameterError("levels must be at least 1", field="/levels")
    pairs = np.asarray(pairs, dtype=np.float64).reshape(-1, 2)
    if not np.isfinite(pairs).all():
        raise ParameterError("landscapes need finite deaths", field="/pairs")
    values = np.zeros((levels, grid.size))
    if len(pairs) == 0:
        return values
    columns = max(1, _BLOCK // len(pairs))
    for start in range(0, grid.size, columns):
        t = grid[start : start + columns]
        tents = np.minimum(t[None, :] - pairs[:, :1], pairs[:, 1:] - t[None, :])
        np.maximum(tents, 0.0, out=tents)
        top = min(levels, len(pairs))
        if top < len(pairs):  # the `top` largest per column, then in order
            tents = np.partition(tents, len(pairs) - top, axis=0)[len(pairs) - top :]
        values[:top, start : start + columns] = -np.sort(-tents, axis=0)
    return values
