"""Exact bottleneck distance between finite persistence diagrams (L-infinity ground metric).

d_B(A, B) = min over matchings of the largest cost, where a point may also go to the diagonal
(Cohen-Steiner, Edelsbrunner & Harer 2007). The value is one of the candidate costs
(a point-to-point cost or a half persistence), so it is found by a binary search over the
candidates with a matching test at each step (Efrat, Itai & Katz 2001 take the same route).

The test at threshold r: points farther than r from the diagonal ("big" points) must be
matched to a point of the other diagram within r; the others may go to the diagonal. A
matching covering the big points of A and another covering the big points of B exist iff one
matching covers both (the Mendelsohn-Dulmage theorem, 1958), so each side is one maximum
bipartite matching (Hopcroft-Karp, scipy) on the edges of cost <= r.

The search starts from a lower bound that is itself a candidate (every point must pay at least
its cheapest option) and an upper bound that is always feasible (all points to the diagonal),
and only edges that can ever be needed (cost < the larger half persistence of the two ends)
are kept.
"""

import numpy as np
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import maximum_bipartite_matching
from scipy.spatial import cKDTree

from workers.core.matching import edges_within, half_persistence

__all__ = ["bottleneck_distance"]


def _covers(rows: np.ndarray, cols: np.ndarray, wanted: np.ndarray, width: int) -> bool:
    """Is there a matching on edges (rows, cols) covering every row where ``wanted``?"""
    need = int(wanted.sum())
    if need == 0:
        return True
    keep = wanted[rows]
    index = (np.cumsum(wanted) - 1)[rows[keep]]  # the wanted rows renumbered 0..need-1
    per_row = np.bincount(index, minlength=need)
    if not per_row.all():  # a big point with no edge at all
        return False
    indptr = np.zeros(need + 1, dtype=np.int32)
    np.cumsum(per_row, out=indptr[1:])
    indices = cols[keep][np.argsort(index, kind="stable")].astype(np.int32)
    graph = csr_matrix(
        (np.ones(indices.size, dtype=np.int8), indices, indptr), shape=(need, width)
    )
    match = maximum_bipartite_matching(graph, perm_type="column")
    return bool((match >= 0).sum() == need)


def bottleneck_distance(a: np.ndarray, b: np.ndarray) -> float:
    """Exact bottleneck distance between finite diagrams a (n, 2) and b (m, 2)."""
    a = np.asarray(a, dtype=np.float64).reshape(-1, 2)
    b = np.asarray(b, dtype=np.float64).reshape(-1, 2)
    half_a, half_b = half_persistence(a), half_persistence(b)
    upper = float(max(half_a.max(initial=0.0), half_b.max(initial=0.0)))
    if len(a) == 0 or len(b) == 0:
        return upper
    lower = _lower_bound(a, b, half_a, half_b)
    # Grow the threshold until a matching exists (at `upper` one always does), keeping only
    # edges cheaper than the threshold: near the answer they are few.
    reach = lower
    while True:
        reach = min(upper, reach)
        rows, cols, costs = _edges_up_to(a, b, half_a, half_b, lower, reach)
        if reach >= upper or _feasible(rows, cols, costs, half_a, half_b, reach):
            break
        lower, reach = reach, max(2 * reach, np.nextafter(reach, np.inf))
    if reach == lower:
        return float(lower)
    # Now infeasible at `lower`, feasible at `reach`: the answer is a candidate in between.
    candidates = np.concatenate([costs, half_a, half_b])
    candidates = np.unique(candidates[(candidates > lower) & (candidates < reach)])
    low, high = -1, len(candidates)  # index high stands for `reach` itself
    while high - low > 1:
        middle = (low + high) // 2
        if _feasible(rows, cols, costs, half_a, half_b, float(candidates[middle])):
            high = middle
        else:
            low = middle
    return float(candidates[high]) if high < len(candidates) else float(reach)


def _lower_bound(a: np.ndarray, b: np.ndarray, half_a: np.ndarray, half_b: np.ndarray) -> float:
    """max over all points of the cheapest option each has: a candidate value and a bound."""
    nearest_a, _ = cKDTree(b).query(a, k=1, p=np.inf)
    nearest_b, _ = cKDTree(a).query(b, k=1, p=np.inf)
    return float(max(np.minimum(half_a, nearest_a).max(), np.minimum(half_b, nearest_b).max()))


def _edges_up_to(
    a: np.ndarray, b: np.ndarray, half_a: np.ndarray, half_b: np.ndarray, lower: float, reach: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Edges of cost <= reach that a threshold in [lower, reach] can need, sorted by cost.

    Such an edge has an end farther than the threshold from the diagonal, so it is found
    from the points with half persistence > lower, which are few near the answer.
    """
    found = []
    for mine, theirs, half, swap in ((a, b, half_a, False), (b, a, half_b, True)):
        big = np.flatnonzero(half > lower)
        # an edge must cost less than the half persistence of its big end
        limits = np.minimum(reach, np.nextafter(half[big], -np.inf))[:, None]
        rows, cols, costs = edges_within(mine[big], theirs, limits.__getitem__)
        rows = big[rows]
        found.append((cols, rows, costs) if swap else (rows, cols, costs))
    rows, cols, costs = (np.concatenate(part) for part in zip(*found, strict=True))
    # An edge with two big ends is found from both sides.
    _, first = np.unique(rows.astype(np.int64) * len(b) + cols, return_index=True)
    rows, cols, costs = rows[first], cols[first], costs[first]
    order = np.argsort(costs, kind="stable")
    return rows[order], cols[order], costs[order]


def _feasible(
    rows: np.ndarray,
    cols: np.ndarray,
    costs: np.ndarray,
    half_a: np.ndarray,
    half_b: np.ndarray,
    r: float,
) -> bool:
    """Can every point farther than r from the diagonal be matched within r?"""
    within = int(np.searchsorted(costs, r, side="right"))
    rows, cols = rows[:within], cols[:within]
    return _covers(rows, cols, half_a > r, len(half_b)) and _covers(
        cols, rows, half_b > r, len(half_a)
    )
