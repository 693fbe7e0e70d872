"""Persistence of a graph filtered by values on its nodes (sublevel sets, H0 and H1).

Convention: the graph is a 1-dimensional simplicial complex. Node ``v`` enters at
``values[v]`` and edge ``(u, v)`` at ``max(values[u], values[v])``, the lower-star
filtration of the node values (the sublevel sets of the function, extended to edges by the
maximum). A node at ``+inf`` never enters, nor does any edge touching it. A self-loop, or a
second copy of an edge, is an edge whose endpoints are already connected when it enters:
it closes a cycle and creates an H1 class, as in a graph seen as a 1-dimensional CW complex.

Method (exact; the C extension ``workers.core._graph`` does the work, with the GIL
released):

* The nodes are sorted by value (numpy's stable argsort) and the edges bucketed by the rank
  of their later endpoint (a counting sort in C), which orders them by value: edges of equal
  value in any order, which the diagrams do not depend on.
* H0: union-find over the edges in that order with the elder rule (Edelsbrunner, Letscher &
  Zomorodian 2002, "Topological persistence and simplification"): when an edge joins two
  components, the younger one (the later minimum) dies at the edge's value. Each component
  left at the end is an essential class, born at its minimum. The elder root stays the root
  (ranks compare ages, no size field), with path halving.
* H1: a 1-complex has no 2-cells, so nothing ever kills a cycle: every edge whose endpoints
  are already connected creates a class (edge value, ``+inf``). This is the other half of
  the same sweep (Kruskal's algorithm: the edges that do not join components are the
  complement of a minimum spanning forest).
"""

import numpy as np

from workers.core import _graph
from workers.core.diagrams import sort_pairs
from workers.core.errors import InvalidArrayError, ParameterError

__all__ = ["graph_diagrams"]


def graph_diagrams(values: np.ndarray, edges: np.ndarray, *, max_dim: int = 1) -> list[np.ndarray]:
    """Persistence diagrams of the sublevel filtration of a graph.

    ``values``: (n,) float64, one value per node, each finite or ``+inf`` (never enters).
    ``edges``: (m, 2) integer node indices 0..n-1, any integer dtype; self-loops and repeated
    edges are allowed (each closes a cycle, see the module docstring). ``max_dim``: highest
    homology dimension, 0 or 1.

    Returns ``max_dim + 1`` arrays, one per dimension 0..max_dim, each (k, 2) float64 of
    (birth, death) in the units of ``values``, sorted by ``sort_pairs``; death ``np.inf`` for
    classes that never die (one per connected component in H0, every H1 class). Zero-length
    pairs are left out, as ``drop_empty_bars`` would.
    """
    nodes = np.ascontiguousarray(values, dtype=np.float64)
    if nodes.ndim != 1:
        raise InvalidArrayError("values must be a 1D array, one value per node")
    if not bool((nodes > -np.inf).all()):  # NaN compares false too
        raise InvalidArrayError("values must be finite or +inf (never in the graph)")
    pairs = np.asarray(edges)
    if pairs.ndim != 2 or pairs.shape[1] != 2:
        raise InvalidArrayError("edges must be an (m, 2) array of node indices")
    if pairs.size and not np.issubdtype(pairs.dtype, np.integer):
        raise InvalidArrayError("edges must hold integer node indices")
    # on the caller's dtype, so that unsigned indices beyond int64 cannot wrap around
    if pairs.size and not (bool((pairs >= 0).all()) and bool((pairs < len(nodes)).all())):
        raise InvalidArrayError(f"edges must index nodes 0..{len(nodes) - 1}")
    if not 0 <= max_dim <= 1:
        raise ParameterError("max_dim must be 0 or 1 for a graph", field="/max_dim")
    order = np.argsort(nodes, kind="stable")
    packed = _graph.diagrams(
        nodes.data,
        np.ascontiguousarray(order, dtype=np.int64).data,
        np.ascontiguousarray(pairs, dtype=np.int64).data,
        max_dim,
    )
    return [sort_pairs(np.frombuffer(block, dtype=np.float64).reshape(-1, 2)) for block in packed]
