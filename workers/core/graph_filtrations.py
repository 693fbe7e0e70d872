"""Filtration values of a graph's nodes: height, radial distance and geodesic distance.

Each function returns one float64 value per node; an edge enters with its later end (see
``workers.core.graph_persistence``). Coordinates are physical, (n, d) float64; values are in
their units. A node that never enters gets ``+inf``.
"""

import numpy as np
import scipy.sparse
from scipy.sparse.csgraph import dijkstra

from workers.core.errors import InvalidArrayError, ParameterError

__all__ = ["node_heights", "node_radial_distances", "geodesic_distances"]


def node_heights(coordinates: np.ndarray, direction: np.ndarray) -> np.ndarray:
    """Projection (n,) of each node on the unit vector ``direction`` (d,)."""
    values: np.ndarray = np.asarray(coordinates, dtype=np.float64) @ np.asarray(direction, float)
    return values


def node_radial_distances(coordinates: np.ndarray, center: np.ndarray) -> np.ndarray:
    """Euclidean distance (n,) of each node from ``center`` (d,)."""
    offsets = np.asarray(coordinates, dtype=np.float64) - np.asarray(center, dtype=np.float64)
    values = np.zeros(len(offsets))
    for column in offsets.T:
        values = np.hypot(values, column)  # hypot: no overflow of the squares
    return values


def geodesic_distances(
    node_count: int, edges: np.ndarray, lengths: np.ndarray, seeds: np.ndarray
) -> np.ndarray:
    """Shortest-path distance (n,) along the graph from the nearest seed node; +inf where no
    path reaches.

    ``edges`` (m, 2) int64 without repeated pairs, ``lengths`` (m,) float64 >= 0 (a zero
    length is an edge too: scipy keeps explicit zeros of a sparse matrix), ``seeds`` (s,)
    node positions. Dijkstra's algorithm from all seeds at once (scipy.sparse.csgraph).
    """
    edges = np.asarray(edges, dtype=np.int64).reshape(-1, 2)
    lengths = np.asarray(lengths, dtype=np.float64)
    seeds = np.asarray(seeds, dtype=np.int64)
    if len(lengths) != len(edges) or (lengths < 0).any():
        raise InvalidArrayError("lengths must be one non-negative number per edge")
    if len(seeds) == 0 or (seeds < 0).any() or (seeds >= node_count).any():
        raise ParameterError(
            f"seeds must be node positions between 0 and {node_count - 1}", field="/seeds"
        )
    adjacency = scipy.sparse.csr_matrix(
        (lengths, (edges[:, 0], edges[:, 1])), shape=(node_count, node_count)
    )
    distances: np.ndarray = dijkstra(
        adjacency, directed=False, indices=np.unique(seeds), min_only=True
    )
    return distances
