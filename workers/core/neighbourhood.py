"""An upper bound on every birth that matters in a Rips filtration of points in R^2 or R^3.

An edge uv with a *witness* w, max(|uw|, |vw|) < |uv|, enters together with the triangle uvw,
whose other edges are strictly earlier: uv is then homologous to the path u-w-v and creates
no class of nonzero persistence (in the language of discrete Morse theory, (uv, uvw) is an
apparent pair). So every H0 death and every positive-persistence H1 birth happens at an edge
with an empty lune, i.e. an edge of the relative neighbourhood graph (Toussaint 1980, "The
relative neighbourhood graph of a finite planar set"). That graph is a subgraph of the
Delaunay triangulation, which makes its longest edge cheap to find.
"""

import numpy as np
from scipy.spatial import Delaunay, QhullError, cKDTree

__all__ = ["longest_neighbourhood_edge"]

WITNESS_MARGIN = 1e-12
"""Relative margin by which a witness must be inside the lune (float64 norms differ by ulps)."""

NEAR_WITNESSES = 8
"""Nearest neighbours of each end tried as witnesses for all edges at once."""


def longest_neighbourhood_edge(points: np.ndarray) -> float | None:
    """Length of the longest relative-neighbourhood-graph edge of ``points`` (n, d), d <= 3.

    Returns None when the shortcut does not apply: d > 3, too few points for a triangulation,
    or a degenerate set (collinear, coplanar in 3D, repeated points) that Qhull cannot
    triangulate with every point as a vertex. Callers then fall back to the full filtration.
    """
    n, dim = points.shape
    if dim not in (2, 3) or n <= dim + 1:
        return None
    try:
        triangulation = Delaunay(points)
    except QhullError:
        return None
    if len(triangulation.coplanar):  # some points are not vertices: the edge set is incomplete
        return None
    starts, neighbours = triangulation.vertex_neighbor_vertices  # the edges, in CSR form
    ends = np.repeat(np.arange(n), np.diff(starts))
    edges = np.column_stack([ends, neighbours])[ends < neighbours]
    lengths = np.linalg.norm(points[edges[:, 0]] - points[edges[:, 1]], axis=1)
    order = np.argsort(-lengths, kind="stable")
    edges, lengths = edges[order], lengths[order]
    # Witnesses must be clearly inside: a point lost to rounding only makes L larger,
    # which keeps it an upper bound; a false witness could make it too small.
    strictly = lengths * (1 - WITNESS_MARGIN)
    tree = cKDTree(points)
    # Most edges that are not in the graph have a witness among the few nearest neighbours
    # of their ends: test those for all edges at once, then only the rest one by one.
    _, near = tree.query(points, k=min(NEAR_WITNESSES + 1, n))
    u, v = edges[:, 0], edges[:, 1]
    candidates = np.concatenate([near[u], near[v]], axis=1)
    to_u = np.linalg.norm(points[candidates] - points[u][:, None, :], axis=2)
    to_v = np.linalg.norm(points[candidates] - points[v][:, None, :], axis=2)
    inside = (to_u < strictly[:, None]) & (to_v < strictly[:, None])
    inside &= (candidates != u[:, None]) & (candidates != v[:, None])
    for index in np.flatnonzero(~inside.any(axis=1)):  # longest first
        a, b = edges[index]
        near_a = np.asarray(tree.query_ball_point(points[a], lengths[index]), dtype=np.intp)
        near_a = near_a[(near_a != a) & (near_a != b)]
        in_lune = (np.linalg.norm(points[near_a] - points[a], axis=1) < strictly[index]) & (
            np.linalg.norm(points[near_a] - points[b], axis=1) < strictly[index]
        )
        if not in_lune.any():
            return float(lengths[index])
    return 0.0
