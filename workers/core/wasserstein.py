"""Exact p-Wasserstein distance between finite persistence diagrams (L-infinity ground metric).

W_p(A, B) = (min over matchings of the sum of cost^p) ^ (1/p), where a point may also go to
the diagonal at cost (d - b) / 2 (Cohen-Steiner, Edelsbrunner, Harer & Mileyko 2010).

As an assignment problem with n <= m (swap the diagrams otherwise): each point a_i takes
either a point b_j, at cost c(a_i, b_j)^p - h(b_j)^p, or its own diagonal slot, at cost
h(a_i)^p; the b_j nobody takes go to the diagonal, which adds sum_j h(b_j)^p to every
matching. That n x (m + n) problem is solved exactly by LAPJVsp (Jonker & Volgenant 1987,
scipy's ``min_weight_full_bipartite_matching``) on the sparse graph of the edges that can be
optimal: matching a_i to b_j costs more than sending both to the diagonal whenever
c^p > h(a_i)^p + h(b_j)^p, so such edges are left out (replacing them lowers the total).
"""

import numpy as np
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import min_weight_full_bipartite_matching

from workers.core.errors import ParameterError
from workers.core.matching import edges_within, half_persistence

__all__ = ["wasserstein_distance"]


def wasserstein_distance(a: np.ndarray, b: np.ndarray, *, order: float = 1.0) -> float:
    """Exact W_order between finite diagrams a (n, 2) and b (m, 2); order >= 1.

    Exact to float64 rounding for orders up to 8 (what the API allows). Above that, a
    diagram whose costs span many decades has costs to the power that differ by more than
    float64's 16 digits, and the solver can no longer tell the small ones apart.
    """
    if not order >= 1 or not np.isfinite(order):
        raise ParameterError("order must be a finite number >= 1", field="/order")
    # Points on the diagonal go to it at no cost and change nothing: leave them out.
    a = np.asarray(a, dtype=np.float64).reshape(-1, 2)
    b = np.asarray(b, dtype=np.float64).reshape(-1, 2)
    a, b = a[a[:, 1] > a[:, 0]], b[b[:, 1] > b[:, 0]]
    if len(a) > len(b):
        a, b = b, a
    n, m = len(a), len(b)
    # Work in units of the largest half persistence: costs^order then neither overflow nor
    # underflow (every edge kept costs at most 2 of these units), and W scales back linearly.
    unit = float(max(half_persistence(a).max(initial=0.0), half_persistence(b).max(initial=0.0)))
    if unit == 0.0:  # every point on the diagonal
        return 0.0
    a, b = a / unit, b / unit
    to_diagonal_a = half_persistence(a) ** order
    to_diagonal_b = half_persistence(b) ** order
    if n == 0:
        return unit * float(to_diagonal_b.sum() ** (1 / order))

    def limit(block: slice) -> np.ndarray:
        bound: np.ndarray = (to_diagonal_a[block, None] + to_diagonal_b[None, :]) ** (1 / order)
        return bound

    rows, cols, costs = edges_within(a, b, limit)
    powered = costs**order
    weights = np.concatenate([powered - to_diagonal_b[cols], to_diagonal_a])
    # LAPJVsp takes an explicit zero for a missing edge, so an exact 0 becomes the smallest
    # positive double. No common shift: it would drown weights far below the largest, and a
    # point far from the diagonal would decide the matching of all the small ones.
    weights[weights == 0.0] = np.finfo(np.float64).smallest_subnormal
    graph = csr_matrix(
        (weights, (np.concatenate([rows, np.arange(n)]), np.concatenate([cols, m + np.arange(n)]))),
        shape=(n, m + n),
    )
    matched_rows, matched_cols = min_weight_full_bipartite_matching(graph)
    to_point = matched_cols < m
    taken = matched_cols[to_point]
    edge_costs = np.maximum(
        np.abs(a[matched_rows[to_point], 0] - b[taken, 0]),
        np.abs(a[matched_rows[to_point], 1] - b[taken, 1]),
    )
    # The total from the matching itself, not from the shifted weights: no cancellation.
    left_b = np.ones(m, dtype=bool)
    left_b[taken] = False
    total = (
        (edge_costs**order).sum()
        + to_diagonal_a[matched_rows[~to_point]].sum()
        + to_diagonal_b[left_b].sum()
    )
    return unit * float(total ** (1 / order))
