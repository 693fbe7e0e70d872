"""Descriptors of a vessel or fibre network given as a graph: counts, lengths, tortuosity.

A graph is four arrays: ``coordinates`` (n, d) float64 node positions, d = 2 or 3, in
physical units; ``edges`` (m, 2) int64 node indices; ``lengths`` (m,) float64 >= 0, the
physical length of each edge along the vessel (callers without one pass ``edge_lengths``, the
Euclidean distance of the endpoints); ``radius`` (n,) float64 >= 0 per node, or None.
Edges are undirected and assumed clean: no self-loops and no two edges joining the same pair
of nodes (``clean_edges`` makes them so, and says which input edges it dropped).

Methods (all vectorised with numpy and scipy.sparse.csgraph, no loop over nodes or edges):

* Betti numbers of the graph as a 1-complex: b0 = number of connected components (isolated
  nodes included), b1 = E - V + b0, the cyclomatic number (Kirchhoff 1847; Berge, "The
  theory of graphs", ch. 4), which is the number of independent cycles.
* Segments, the usual unit of skeleton morphometry: maximal paths whose inner nodes have
  degree 2. Two edges are linked when they meet at a node of degree 2; every edge has at most
  two links, so the connected components of this edge graph are paths (open segments, whose
  two free endpoint occurrences sit at nodes of degree != 2) or cycles (closed segments: a
  cycle all of whose nodes have degree 2).
* Tortuosity of a segment: its length over the Euclidean distance of its two ends, the
  "distance metric" of Bullitt et al. 2003, "Measuring tortuosity of the intracerebral
  vasculature from MRA images" (IEEE Trans. Med. Imaging 22(9)).
* Shells: concentric spherical (circular in 2D) shells around a centre, a radial profile of
  the descriptors in the spirit of Sholl's concentric-circle analysis (Sholl 1953, "Dendritic
  organization in the neurons of the visual and motor cortices of the cat").
"""

from collections.abc import Sequence
from dataclasses import dataclass, fields

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from workers.core.errors import InvalidArrayError, ParameterError

__all__ = [
    "EdgeCleanup",
    "NetworkDescriptors",
    "clean_edges",
    "edge_lengths",
    "equal_shells",
    "network_descriptors",
    "shell_descriptors",
]


@dataclass(frozen=True)
class EdgeCleanup:
    """What ``clean_edges`` kept and dropped; every position indexes the input edge array.

    ``edges``: (k, 2) int64, the kept edges in input order and orientation. ``kept``: (k,)
    int64 positions of the kept edges (subset per-edge arrays such as lengths with it).
    ``self_loops``: int64 positions of the edges dropped because both ends are one node.
    ``duplicates``: int64 positions of the edges dropped because an earlier edge joins the
    same unordered pair of nodes.
    """

    edges: np.ndarray
    kept: np.ndarray
    self_loops: np.ndarray
    duplicates: np.ndarray


@dataclass(frozen=True)
class NetworkDescriptors:
    """Descriptors of one graph; lengths in the units of the lengths, radii of the radii.

    ``as_dict`` gives them in field order. A mean or median of an empty set is None.
    """

    node_count: int
    edge_count: int
    segment_count: int
    """Maximal paths whose inner nodes have degree 2; a cycle of degree-2 nodes counts once."""
    tip_count: int
    """Nodes of degree 1."""
    branch_point_count: int
    """Nodes of degree >= 3."""
    component_count: int
    """b0: connected components, isolated nodes included."""
    cycle_count: int
    """b1 = edge_count - node_count + component_count."""
    total_length: float
    mean_segment_length: float | None
    median_segment_length: float | None
    """Segment length: the sum of its edge lengths."""
    mean_tortuosity: float | None
    """Mean of segment length / end-to-end distance over the open segments whose two ends
    are distinct nodes at distinct positions; None when no segment qualifies."""
    extent: float | None
    """max - min of the node projections on ``direction``; None without a direction or
    without nodes."""
    mean_radius: float | None
    """Length-weighted mean over edges of the mean radius of the two endpoints; None without
    radius or when total_length is 0."""

    def as_dict(self) -> dict[str, int | float | None]:
        """The descriptors by name, in field order."""
        return {field.name: getattr(self, field.name) for field in fields(self)}


def _coordinates(coordinates: np.ndarray) -> np.ndarray:
    array = np.asarray(coordinates, dtype=np.float64)
    if array.ndim != 2 or array.shape[1] not in (2, 3):
        raise InvalidArrayError(
            "coordinates must be an (n, 2) or (n, 3) array", field="/coordinates"
        )
    if not np.isfinite(array).all():
        raise InvalidArrayError("coordinates must be finite", field="/coordinates")
    return array


def _edges(edges: np.ndarray, node_count: int | None) -> np.ndarray:
    array = np.asarray(edges)
    if array.size == 0:  # an empty JSON list arrives as a float (0,) array
        return np.zeros((0, 2), dtype=np.int64)
    if array.ndim != 2 or array.shape[1] != 2:
        raise InvalidArrayError("edges must be an (m, 2) array of node indices", field="/edges")
    if not np.issubdtype(array.dtype, np.integer):
        raise InvalidArrayError("edges must hold integer node indices", field="/edges")
    array = array.astype(np.int64, copy=False)
    if array.min() < 0 or (node_count is not None and array.max() >= node_count):
        raise InvalidArrayError("edges must index existing nodes", field="/edges")
    return array


def _per_edge(lengths: np.ndarray, edge_count: int) -> np.ndarray:
    array = np.asarray(lengths, dtype=np.float64)
    if array.shape != (edge_count,):
        raise InvalidArrayError("lengths must hold one value per edge", field="/lengths")
    if not (np.isfinite(array).all() and (array >= 0).all()):
        raise InvalidArrayError("lengths must be finite and >= 0", field="/lengths")
    return array


def _per_node(radius: np.ndarray | None, node_count: int) -> np.ndarray | None:
    if radius is None:
        return None
    array = np.asarray(radius, dtype=np.float64)
    if array.shape != (node_count,):
        raise InvalidArrayError("radius must hold one value per node", field="/radius")
    if not (np.isfinite(array).all() and (array >= 0).all()):
        raise InvalidArrayError("radius must be finite and >= 0", field="/radius")
    return array


def _vector(vector: Sequence[float] | np.ndarray, dimension: int, name: str) -> np.ndarray:
    array = np.asarray(vector, dtype=np.float64)
    if array.shape != (dimension,) or not np.isfinite(array).all():
        raise ParameterError(f"{name} must be {dimension} finite numbers", field=f"/{name}")
    return array


def _distances(points: np.ndarray, center: np.ndarray) -> np.ndarray:
    """Euclidean distance of each row from ``center``, one formula for nodes, midpoints and
    shell boundaries alike, so a node at the largest distance is compared to itself."""
    distances: np.ndarray = np.sqrt(np.square(points - center).sum(axis=1))
    return distances


def edge_lengths(coordinates: np.ndarray, edges: np.ndarray) -> np.ndarray:
    """(m,) float64 Euclidean length of each edge, in the units of ``coordinates`` (n, d)."""
    points = _coordinates(coordinates)
    pairs = _edges(edges, len(points))
    return _distances(points[pairs[:, 0]], points[pairs[:, 1]])


def clean_edges(edges: np.ndarray) -> EdgeCleanup:
    """Drop self-loops and repeated edges from ``edges`` (m, 2) of node indices >= 0.

    Edges are undirected: (u, v) and (v, u) are the same edge; the first occurrence is kept.
    """
    pairs = _edges(edges, None)
    positions = np.arange(len(pairs), dtype=np.int64)
    loop = pairs[:, 0] == pairs[:, 1]
    candidates = positions[~loop]
    low = np.minimum(pairs[candidates, 0], pairs[candidates, 1])
    high = np.maximum(pairs[candidates, 0], pairs[candidates, 1])
    # Sorted by (low, high, position): the first of each run of equal pairs is the earliest.
    order = np.lexsort((candidates, high, low))
    low, high = low[order], high[order]
    first = np.ones(len(order), dtype=bool)
    first[1:] = (low[1:] != low[:-1]) | (high[1:] != high[:-1])
    kept = np.sort(candidates[order[first]])
    return EdgeCleanup(
        edges=pairs[kept],
        kept=kept,
        self_loops=positions[loop],
        duplicates=np.sort(candidates[order[~first]]),
    )


def _segments(
    edges: np.ndarray, degree: np.ndarray, lengths: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Segment decomposition: (segment lengths (s,), open segment ids (o,), and their two
    end nodes (o,) and (o,))."""
    edge_count = len(edges)
    if edge_count == 0:
        empty = np.zeros(0, dtype=np.int64)
        return np.zeros(0), empty, empty, empty
    # Endpoint occurrence k belongs to edge k // 2 and sits at node ends[k].
    ends = edges.ravel()
    through = degree[ends] == 2
    inner = np.flatnonzero(through)
    # A degree-2 node has exactly two occurrences; sorted by node they come in pairs.
    linked = inner[np.argsort(ends[inner], kind="stable")].reshape(-1, 2) // 2
    links = coo_matrix(
        (np.ones(len(linked), dtype=np.int8), (linked[:, 0], linked[:, 1])),
        shape=(edge_count, edge_count),
    )
    count, label = connected_components(links, directed=False)
    segment_lengths = np.bincount(label, weights=lengths, minlength=count)
    # An open segment (a path of the edge graph) has exactly two free occurrences.
    free = np.flatnonzero(~through)
    free_label = label[free // 2]
    order = np.argsort(free_label, kind="stable")
    free_pairs = ends[free[order]].reshape(-1, 2)
    return segment_lengths, free_label[order][::2], free_pairs[:, 0], free_pairs[:, 1]


def _mean(values: np.ndarray) -> float | None:
    return float(values.mean()) if values.size else None


def _descriptors(
    points: np.ndarray,
    edges: np.ndarray,
    lengths: np.ndarray,
    direction: np.ndarray | None,
    radius: np.ndarray | None,
) -> NetworkDescriptors:
    """``network_descriptors`` on arrays already checked."""
    node_count, edge_count = len(points), len(edges)
    degree = np.bincount(edges.ravel(), minlength=node_count)
    adjacency = coo_matrix(
        (np.ones(edge_count, dtype=np.int8), (edges[:, 0], edges[:, 1])),
        shape=(node_count, node_count),
    )
    components = int(connected_components(adjacency, directed=False)[0]) if node_count else 0
    segment_lengths, open_ids, start, stop = _segments(edges, degree, lengths)

    distinct = start != stop
    chord = _distances(points[start[distinct]], points[stop[distinct]])
    apart = chord > 0
    tortuosity = segment_lengths[open_ids[distinct][apart]] / chord[apart]

    total = float(lengths.sum())
    extent = None
    if direction is not None and node_count:
        heights = points @ direction
        extent = float(heights.max() - heights.min())
    mean_radius = None
    if radius is not None and total > 0:
        edge_radius = 0.5 * (radius[edges[:, 0]] + radius[edges[:, 1]])
        mean_radius = float((edge_radius * lengths).sum() / total)
    return NetworkDescriptors(
        node_count=node_count,
        edge_count=edge_count,
        segment_count=len(segment_lengths),
        tip_count=int((degree == 1).sum()),
        branch_point_count=int((degree >= 3).sum()),
        component_count=components,
        cycle_count=edge_count - node_count + components,
        total_length=total,
        mean_segment_length=_mean(segment_lengths),
        median_segment_length=(float(np.median(segment_lengths)) if segment_lengths.size else None),
        mean_tortuosity=_mean(tortuosity),
        extent=extent,
        mean_radius=mean_radius,
    )


def network_descriptors(
    coordinates: np.ndarray,
    edges: np.ndarray,
    lengths: np.ndarray,
    *,
    direction: Sequence[float] | np.ndarray | None = None,
    radius: np.ndarray | None = None,
) -> NetworkDescriptors:
    """Counts, lengths, tortuosity, extent and radius of a graph (see ``NetworkDescriptors``).

    ``coordinates`` (n, d) float64, d = 2 or 3; ``edges`` (m, 2) int64 node indices, assumed
    clean (no self-loops, no repeated pair: pass them through ``clean_edges`` first; Betti
    numbers and segments are those of the graph as given otherwise); ``lengths`` (m,) float64
    >= 0 per edge; ``direction`` (d,) a unit vector, normalised by the caller, for
    ``extent``; ``radius`` (n,) float64 >= 0 per node, for ``mean_radius``. Lengths, extent
    and radius keep their units.
    """
    points = _coordinates(coordinates)
    pairs = _edges(edges, len(points))
    per_edge = _per_edge(lengths, len(pairs))
    per_node = _per_node(radius, len(points))
    unit = None if direction is None else _vector(direction, points.shape[1], "direction")
    return _descriptors(points, pairs, per_edge, unit, per_node)


def shell_descriptors(
    coordinates: np.ndarray,
    edges: np.ndarray,
    lengths: np.ndarray,
    *,
    center: Sequence[float] | np.ndarray,
    boundaries: Sequence[float] | np.ndarray,
    direction: Sequence[float] | np.ndarray | None = None,
    radius: np.ndarray | None = None,
) -> list[NetworkDescriptors]:
    """``network_descriptors`` of each concentric shell around ``center`` (d,).

    ``boundaries`` r_0 < r_1 < ... < r_K (finite, units of ``coordinates``) give K shells,
    shell i holding the distances in [r_i, r_{i+1}). An edge belongs to the shell holding the
    distance of its midpoint from ``center``, so each edge is counted in one shell at most;
    a shell's graph is its edges with both their endpoints (an endpoint may lie in another
    shell; degrees, segments and tortuosity are those of the shell's graph), plus the nodes
    of degree 0 in the whole graph whose distance falls in the shell. Edges and isolated
    nodes outside [r_0, r_K) are in no shell. Other arguments as in ``network_descriptors``.
    Returns K descriptors, innermost shell first.
    """
    points = _coordinates(coordinates)
    pairs = _edges(edges, len(points))
    per_edge = _per_edge(lengths, len(pairs))
    per_node = _per_node(radius, len(points))
    dimension = points.shape[1]
    unit = None if direction is None else _vector(direction, dimension, "direction")
    origin = _vector(center, dimension, "center")
    limits = np.asarray(boundaries, dtype=np.float64)
    if limits.ndim != 1 or len(limits) < 2 or not np.isfinite(limits).all():
        raise ParameterError("boundaries must be at least 2 finite numbers", field="/boundaries")
    if not (np.diff(limits) > 0).all():
        raise ParameterError("boundaries must be strictly increasing", field="/boundaries")
    shells = len(limits) - 1

    midpoints = 0.5 * (points[pairs[:, 0]] + points[pairs[:, 1]])
    edge_shell = np.searchsorted(limits, _distances(midpoints, origin), side="right") - 1
    edge_order = np.argsort(edge_shell, kind="stable")
    edge_cuts = np.searchsorted(edge_shell[edge_order], np.arange(shells + 1))

    isolated = np.flatnonzero(np.bincount(pairs.ravel(), minlength=len(points)) == 0)
    node_shell = np.searchsorted(limits, _distances(points[isolated], origin), side="right") - 1
    node_order = np.argsort(node_shell, kind="stable")
    node_cuts = np.searchsorted(node_shell[node_order], np.arange(shells + 1))

    results = []
    for shell in range(shells):
        chosen = edge_order[edge_cuts[shell] : edge_cuts[shell + 1]]
        alone = isolated[node_order[node_cuts[shell] : node_cuts[shell + 1]]]
        touched, relabelled = np.unique(pairs[chosen], return_inverse=True)
        nodes = np.concatenate([touched, alone])
        results.append(
            _descriptors(
                points[nodes],
                relabelled.reshape(-1, 2).astype(np.int64, copy=False),
                per_edge[chosen],
                unit,
                None if per_node is None else per_node[nodes],
            )
        )
    return results


def equal_shells(
    coordinates: np.ndarray,
    center: Sequence[float] | np.ndarray,
    count: int,
    max_radius: float | None = None,
) -> np.ndarray:
    """(count + 1,) float64 boundaries of ``count`` shells of equal width from 0 to
    ``max_radius`` around ``center`` (d,), in the units of ``coordinates`` (n, d).

    Without ``max_radius``, the largest distance of a node from ``center``, moved up by one
    float64 step (np.nextafter) so that the farthest node lies inside the last, half-open
    shell.
    """
    points = _coordinates(coordinates)
    origin = _vector(center, points.shape[1], "center")
    if isinstance(count, bool) or not isinstance(count, int | np.integer) or count < 1:
        raise ParameterError("count must be an integer >= 1", field="/count")
    if max_radius is None:
        if len(points) == 0:
            raise ParameterError("no nodes: give max_radius", field="/max_radius")
        farthest = float(_distances(points, origin).max())
        if farthest == 0:
            raise ParameterError(
                "every node is at the center: give max_radius", field="/max_radius"
            )
        max_radius = float(np.nextafter(farthest, np.inf))
    if not (np.isfinite(max_radius) and max_radius > 0):
        raise ParameterError("max_radius must be finite and > 0", field="/max_radius")
    limits = np.linspace(0.0, max_radius, int(count) + 1)
    if not (np.diff(limits) > 0).all():  # widths below float64 resolution
        raise ParameterError("max_radius is too small for that many shells", field="/count")
    return limits
