"""Betti curves: beta_k(t), the number of classes alive at t, on a fixed grid.

A pair (b, d) counts at t when b <= t < d (born at b, dead from d on), the usual half-open
convention (common practice); essential classes (d = inf) count at every t >= b.
"""

import numpy as np

__all__ = ["betti_curve"]


def betti_curve(pairs: np.ndarray, *, grid: np.ndarray) -> np.ndarray:
    """#{(b, d) in ``pairs`` : b <= t < d} for each t of ``grid``: (s,) float64."""
    pairs = np.asarray(pairs, dtype=np.float64).reshape(-1, 2)
    born = np.searchsorted(np.sort(pairs[:, 0]), grid, side="right")
    dead = np.searchsorted(np.sort(pairs[:, 1]), grid, side="right")
    counts: np.ndarray = (born - dead).astype(np.float64)
    return counts
