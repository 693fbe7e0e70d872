"""The geometry shared by the matching distances between persistence diagrams.

Both the bottleneck and the Wasserstein distances match the points of two diagrams to each
other or to the diagonal, under the L-infinity ground metric (common practice): the cost of
a <-> b is max(|b_a - b_b|, |d_a - d_b|) and the cost of a <-> diagonal is (d_a - b_a) / 2,
the L-infinity distance from a to its nearest diagonal point.

Only the edges a distance can use are kept. They are found by scanning the cost matrix a block
of rows at a time, so memory grows with the number of kept edges, never with n * m.
"""

from collections.abc import Callable

import numpy as np

__all__ = ["half_persistence", "linf_costs", "edges_within", "Limit"]

BLOCK_CELLS = 1 << 20
"""Cost-matrix cells computed at once while scanning (8 MiB of float64)."""

Limit = Callable[[slice], np.ndarray]
"""rows of a -> the largest cost an edge from each row may have, broadcastable to (rows, m)."""


def half_persistence(pairs: np.ndarray) -> np.ndarray:
    """L-infinity distance of each finite pair (k, 2) to the diagonal: (d - b) / 2."""
    half: np.ndarray = (pairs[:, 1] - pairs[:, 0]) / 2
    return half


def linf_costs(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """L-infinity distance between every row of a (n, 2) and of b (m, 2): (n, m)."""
    cost: np.ndarray = np.maximum(
        np.abs(a[:, None, 0] - b[None, :, 0]), np.abs(a[:, None, 1] - b[None, :, 1])
    )
    return cost


def edges_within(
    a: np.ndarray, b: np.ndarray, limit: Limit
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Every (i, j) with cost(a_i, b_j) <= limit(rows)[i, j], and that cost.

    Returns (rows int32, cols int32, costs float64), ordered by row then column.
    """
    n, m = len(a), len(b)
    found: list[tuple[np.ndarray, np.ndarray, np.ndarray]] = []
    step = max(1, BLOCK_CELLS // max(m, 1))
    for start in range(0, n, step):
        block = slice(start, min(start + step, n))
        cost = linf_costs(a[block], b)
        rows, cols = np.nonzero(cost <= limit(block))
        found.append(((rows + start).astype(np.int32), cols.astype(np.int32), cost[rows, cols]))
    if not found:
        empty = np.empty(0, dtype=np.int32)
        return empty, empty, np.empty(0)
    rows, cols, costs = (np.concatenate(part) for part in zip(*found, strict=True))
    return rows, cols, costs
