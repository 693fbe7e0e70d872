"""Persistence diagrams as arrays: one (k, 2) float64 array of (birth, death) per dimension.

An essential class (one that never dies within the filtration) has death ``np.inf``. Pairs are
sorted by (birth, death) with ``inf`` last, which makes diagrams comparable by equality.
"""

import numpy as np

__all__ = ["sort_pairs", "drop_empty_bars"]


def sort_pairs(pairs: np.ndarray) -> np.ndarray:
    """Return ``pairs`` (k, 2) sorted by birth, then death (``np.inf`` sorts last)."""
    pairs = np.asarray(pairs, dtype=np.float64).reshape(-1, 2)
    order = np.lexsort((pairs[:, 1], pairs[:, 0]))
    return pairs[order]


def drop_empty_bars(pairs: np.ndarray) -> np.ndarray:
    """Remove pairs with death == birth: they carry no persistence (common practice)."""
    pairs = np.asarray(pairs, dtype=np.float64).reshape(-1, 2)
    return pairs[pairs[:, 1] > pairs[:, 0]]
