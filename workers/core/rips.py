"""Vietoris-Rips persistence of a finite point set in R^d.

Filtration values are **edge lengths** (the diameter convention): a simplex enters at the
largest Euclidean distance between two of its vertices. The ball-radius convention, used in
some texts, is exactly half of these values.

How it is computed, fastest exact route first:

1. Past the *enclosing radius* (min over points of the distance to the farthest point) the
   complex is a cone and nothing changes, so no filtration goes further.
2. In R^2 and R^3, every H0 death and every positive-persistence H1 birth is at most L, the
   longest relative-neighbourhood edge (``workers.core.neighbourhood``). A filtration cut at
   s is a prefix of the full one, so its pairs that die by s are exact; if s >= L and no H1
   class is still alive at s, the cut diagram *is* the full diagram. On spread-out data a
   cut at 2L already settles everything, with a small fraction of the edges.
3. When a long-lived loop is still alive at the cut, its death is bounded from a furthest-
   point subsample Y of X with covering radius e: inclusion Y -> X and nearest-point
   projection X -> Y make the two Rips filtrations 2e-interleaved, so their diagrams are
   within bottleneck distance 2e (Chazal, de Silva, Oudot 2014, "Persistence stability for
   geometric complexes"). Hence every H1 death of X is at most
   max(largest H1 death of Y + 2e, L + 4e), and the next cut goes there instead of to the
   enclosing radius.
4. Graphs with many edges are first reduced by edge collapse (Boissonnat & Pritam 2020,
   "Edge collapse and persistence of flag complexes", via gudhi), which keeps the persistence
   of the flag filtration in every dimension. The reduction itself is Ripser's algorithm
   (Bauer 2021, "Ripser: efficient computation of Vietoris-Rips persistence barcodes") in
   gudhi's float64 build, on the sparse graph.

Arithmetic: float64 from the coordinates to the diagram, Z/2 coefficients. Values are exact
pairwise distances (as scipy's pdist computes them), so they compare with ``==``.
"""

from collections.abc import Iterator

import numpy as np

# gudhi's float64 Ripser; private name, but the one gudhi.sklearn.RipsPersistence calls.
# pyproject pins gudhi to the minor release this was tested with.
from gudhi._ripser_ext import _sparse as ripser_sparse
from gudhi.flag_filtration.edge_collapse import reduce_graph
from scipy.sparse import coo_matrix
from scipy.spatial.distance import cdist, pdist

from workers.core.diagrams import drop_empty_bars, sort_pairs
from workers.core.errors import InvalidArrayError, ParameterError
from workers.core.neighbourhood import longest_neighbourhood_edge
from workers.core.subsample import maxmin_subsample

__all__ = ["rips_diagrams", "enclosing_radius", "loop_death_bound", "MAX_DIM"]

MAX_DIM = 2
"""Highest homology dimension: H2 (cavities) is already costly beyond a few thousand points."""

COLLAPSE_ABOVE_EDGES_PER_POINT = 100
"""Edge collapse pays off once the graph has more than this many edges per point (measured)."""

DIRECT_BELOW = 150
"""Up to this many points the whole filtration is cheaper than computing the shortcuts."""

SMALL_SET = 400
"""Below this many points the death bound of step 3 is not worth a subsample."""

ROUNDING_MARGIN = 1e-6
"""Relative slack on computed bounds, far above float64 rounding of the distances."""


def enclosing_radius(points: np.ndarray, block: int = 1024) -> float:
    """min over points of the distance to the farthest point: beyond it the complex is a cone."""
    radius = np.inf
    for start in range(0, points.shape[0], block):
        farthest = cdist(points[start : start + block], points).max(axis=1)
        radius = min(radius, float(farthest.min()))
    return radius


def _condensed_pairs(k: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Row and column (i < j) of positions ``k`` in a condensed distance vector of n points."""
    k = k.astype(np.int64)
    i = (n - 2 - np.floor(np.sqrt(-8.0 * k + 4.0 * n * (n - 1) - 7) / 2.0 - 0.5)).astype(np.int64)
    j = k + i + 1 - n * (n - 1) // 2 + (n - i) * ((n - i) - 1) // 2
    return i, j


def _persistence(
    distances: np.ndarray, n: int, cut: float, max_dim: int, *, collapse: bool = True
) -> list[np.ndarray]:
    """Diagrams of the filtration cut at ``cut`` from condensed ``distances`` of n points."""
    kept = np.flatnonzero(distances <= cut)
    rows, cols = _condensed_pairs(kept, n)
    values = distances[kept]
    if collapse and kept.size > COLLAPSE_ABOVE_EDGES_PER_POINT * n:
        graph = reduce_graph(coo_matrix((values, (rows, cols)), shape=(n, n)), 1)
        rows, cols, values = graph.row, graph.col, graph.data
    raw = ripser_sparse(
        np.ascontiguousarray(rows, dtype=np.int32),
        np.ascontiguousarray(cols, dtype=np.int32),
        np.ascontiguousarray(values, dtype=np.float64),
        n,
        max_dimension=max_dim,
    )
    # Dimensions with no pair at all may be missing from the answer.
    return [
        sort_pairs(drop_empty_bars(np.asarray(raw[k]) if k < len(raw) else np.empty((0, 2))))
        for k in range(max_dim + 1)
    ]


def _loops_alive(diagrams: list[np.ndarray]) -> bool:
    return len(diagrams) > 1 and bool(np.isinf(diagrams[1][:, 1]).any())


def loop_death_bound(points: np.ndarray, birth_bound: float) -> float:
    """Upper bound on every H1 death of ``points`` from a subsample (step 3 of the module doc)."""
    n = points.shape[0]
    if n <= SMALL_SET:
        return np.inf
    sample = maxmin_subsample(points, size=max(SMALL_SET // 2, n // 4), seed=0)
    loops = rips_diagrams(points[sample.indices], max_dim=1)[1]
    deaths = loops[np.isfinite(loops[:, 1]), 1]
    largest = float(deaths.max()) if deaths.size else 0.0
    spread = sample.covering_radius
    return max(largest + 2 * spread, birth_bound + 4 * spread) * (1 + ROUNDING_MARGIN)


def rips_diagrams(
    points: np.ndarray, *, max_dim: int = 1, max_edge: float | None = None
) -> list[np.ndarray]:
    """Persistence diagrams of the Rips filtration of ``points``.

    points: (n, d) float64, finite, n >= 1.
    max_dim: diagrams for dimensions 0..max_dim are returned.
    max_edge: stop the filtration at this edge length (classes alive there get death inf);
        None runs the whole filtration.
    Returns: ``max_dim + 1`` arrays of shape (k, 2), float64, sorted by (birth, death),
        zero-length bars removed, essential classes with death ``np.inf``.
    """
    points = np.asarray(points, dtype=np.float64)
    if points.ndim != 2 or points.shape[0] < 1 or points.shape[1] < 1:
        raise InvalidArrayError("points must be a non-empty (n, d) array", field="/points")
    if not np.isfinite(points).all():
        raise InvalidArrayError("points must be finite", field="/points")
    if not 0 <= max_dim <= MAX_DIM:
        raise ParameterError(f"max_dim must be in 0..{MAX_DIM}", field="/max_dim")
    if max_edge is not None and not max_edge >= 0:
        raise ParameterError("max_edge must be >= 0", field="/max_edge")
    n = points.shape[0]
    if n == 1:
        return [np.array([[0.0, np.inf]])] + [np.empty((0, 2)) for _ in range(max_dim)]
    limit = enclosing_radius(points)
    if max_edge is not None:
        limit = min(limit, float(max_edge))
    distances = pdist(points)
    if max_dim == 2:  # no birth bound for cavities: the collapse does the work
        return _persistence(distances, n, limit, max_dim)
    births = None if n <= DIRECT_BELOW else longest_neighbourhood_edge(points)
    if births is None:  # small, d > 3 or degenerate: every edge, as a dense reduction would
        return _persistence(distances, n, limit, max_dim, collapse=False)
    for cut in _cuts(points, births, limit):
        diagrams = _persistence(distances, n, cut, max_dim)
        if cut >= limit or not _loops_alive(diagrams):
            return diagrams
    raise AssertionError("unreachable: the last cut is the limit")


def _cuts(points: np.ndarray, births: float, limit: float) -> Iterator[float]:
    """Filtration cuts to try in turn, cheapest first (steps 2 and 3 of the module doc)."""
    yield min(2 * births, limit)
    yield min(loop_death_bound(points, births), limit)  # computed only if the first fails
    yield limit
