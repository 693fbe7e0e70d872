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
    simplices = triangulation.simplices
    pairs = [simplices[:, [a, b]] for a in range(dim + 1) for b in range(a + 1, dim + 1)]
    edges = np.unique(np.sort(np.concatenate(pairs), axis=1), axis=0)
    lengths = np.linalg.norm(points[edges[:, 0]] - points[edges[:, 1]], axis=1)
    tree = cKDTree(points)
    for index in np.argsort(-lengths, kind="stable"):
        u, v = edges[index]
        length = lengths[index]
        near_u = np.asarray(tree.query_ball_point(points[u], length), dtype=np.intp)
        near_u = near_u[(near_u != u) & (near_u != v)]
        # Witnesses must be clearly inside: a point lost to rounding only makes L larger,
        # which keeps it an upper bound; a false witness could make it too small.
        strictly = length * (1 - WITNESS_MARGIN)
        in_lune = (np.linalg.norm(points[near_u] - points[u], axis=1) < strictly) & (
            np.linalg.norm(points[near_u] - points[v], axis=1) < strictly
        )
        if not in_lune.any():
            return float(length)
    return 0.0
