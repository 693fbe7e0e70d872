"""The skeleton graph of a 2D or 3D binary vessel mask: centreline pixels as nodes, their
adjacencies as edges, with physical lengths and the vessel radius at each node.

Method:

1. Thinning with ``skimage.morphology.skeletonize``: in 2D the parallel algorithm of Zhang &
   Suen 1984 ("A fast parallel algorithm for thinning digital patterns", CACM 27(3)), in 3D
   the medial-axis thinning of Lee, Kashyap & Chu 1994 ("Building skeleton models via 3-D
   medial surface/axis thinning algorithms", CVGIP: Graphical Models and Image Processing
   56(6)). Both work in *index space*: the thinning ignores ``spacing``, so with anisotropic
   pixels the centreline is the centreline of the mask as drawn on the index grid, which can
   sit up to about a pixel away from the physical medial axis. Topology does not depend on
   spacing; coordinates, lengths and radii are physical. Pixels outside the array count as
   background for the thinning (a bar touching the border thins to its middle line).
2. Nodes are the skeleton pixels; candidate edges join 8-neighbours (2D) or 26-neighbours
   (3D), found by one vectorised shift per offset of the half neighbourhood (4 or 13).
3. Lattice shortcuts are removed: the edge p-q is dropped when a skeleton pixel r adjacent
   to both is strictly closer to each of them than they are to each other, in index units
   (``|p - r|^2 < |p - q|^2`` and ``|r - q|^2 < |p - q|^2``). These are the hypotenuses of the
   small triangles that 8/26-adjacency makes along staircases and at corners; kept, each
   would count as a loop. p and q stay connected through r (by strictly shorter edges).
4. Junction pixels (degree >= 3 after step 3) that touch each other are merged into one
   branch-point node (connected components over the junction-junction edges, with
   scipy.sparse.csgraph), placed at the mean of their coordinates; edges inside a cluster
   disappear, edges leaving it attach to the merged node, duplicates are removed. Lengths are
   the Euclidean distances between the final node coordinates. Merging also absorbs the
   lattice loops step 3 cannot see, such as three voxels pairwise a face diagonal apart
   (no voxel is closer to both ends of any side), when they sit at a junction; the price is
   that a loop made only of touching junction pixels (a tunnel of a voxel or two where tubes
   cross) collapses into its branch point.
5. A blob that thins to one pixel stays as a node without edges.

The radius at a node is the exact Euclidean distance transform of the mask
(scipy.ndimage.distance_transform_edt, Maurer et al. 2003, with ``sampling=spacing``) at its
pixel: the distance from the pixel centre to the nearest background pixel centre *of the
array* (scipy's convention: outside the array is not background, so a vessel cut by the
border keeps its radius there); for a merged branch point, the maximum over its pixels.

Pixel ``(i, j[, k])`` has its centre at ``(i * spacing[0], j * spacing[1][, k * spacing[2]])``,
the convention of ``workers.core.mask_filtrations``.
"""

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.ndimage import distance_transform_edt
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from skimage.morphology import skeletonize

from workers.core.errors import InvalidArrayError

__all__ = ["SkeletonGraph", "skeleton_graph"]


@dataclass(frozen=True, eq=False)
class SkeletonGraph:
    """An undirected graph on the skeleton of a mask, in physical units.

    coordinates: (n, d) float64, node positions in the units of ``spacing`` (array-axis
        order); a merged branch point sits at the mean of its pixels' centres.
    edges: (m, 2) int64 node indices, ``edges[:, 0] < edges[:, 1]``, rows unique and sorted
        lexicographically; no self-loops.
    lengths: (m,) float64, Euclidean distance between the two end nodes of each edge, in the
        units of ``spacing``.
    radius: (n,) float64, the vessel radius at each node in the units of ``spacing``: the
        Euclidean distance transform of the mask at the node's pixel (max over the pixels of
        a merged branch point).
    pixels: (k,) int64, flat (C-order) indices into the mask of every skeleton pixel,
        ascending; ``k >= n``.
    pixel_nodes: (k,) int64, the node each of ``pixels`` belongs to; the pixels of node ``i``
        are ``pixels[pixel_nodes == i]``. Nodes are numbered in increasing order of their
        first (smallest) pixel.
    """

    coordinates: np.ndarray
    edges: np.ndarray
    lengths: np.ndarray
    radius: np.ndarray
    pixels: np.ndarray
    pixel_nodes: np.ndarray


def _half_offsets(ndim: int) -> np.ndarray:
    """The offsets of the half neighbourhood, (4, 2) or (13, 3) int64: the lexicographically
    positive members of {-1, 0, 1}^d, so each unordered neighbour pair is seen once."""
    grid = np.stack(np.meshgrid(*[[-1, 0, 1]] * ndim, indexing="ij"), axis=-1).reshape(-1, ndim)
    return grid[len(grid) // 2 + 1 :].astype(np.int64)  # the centre is the middle row


def _witnesses(offset: np.ndarray) -> np.ndarray:
    """Offsets a (from p) of the pixels r = p + a that make the edge p -> p + offset a
    shortcut: r adjacent to both ends and strictly closer to each than they are to each other
    (squared index distances)."""
    ndim = len(offset)
    grid = np.stack(np.meshgrid(*[[-1, 0, 1]] * ndim, indexing="ij"), axis=-1).reshape(-1, ndim)
    span = int(offset @ offset)
    to_q = grid - offset
    keep = (
        (np.abs(to_q).max(axis=1) <= 1)
        & ((grid * grid).sum(axis=1) < span)
        & ((to_q * to_q).sum(axis=1) < span)
        & (np.abs(grid).max(axis=1) >= 1)
    )
    witnesses: np.ndarray = grid[keep].astype(np.int64)
    return witnesses


def _check(mask: np.ndarray, spacing: Sequence[float]) -> tuple[np.ndarray, np.ndarray]:
    array = np.asarray(mask)
    if array.ndim not in (2, 3) or array.size == 0:
        raise InvalidArrayError("mask must be a non-empty 2D or 3D array")
    if not (array.dtype == np.bool_ or np.issubdtype(array.dtype, np.number)):
        raise InvalidArrayError("mask must be boolean or numeric (nonzero = foreground)")
    if np.iscomplexobj(array) or (
        np.issubdtype(array.dtype, np.floating) and not bool(np.isfinite(array).all())
    ):
        raise InvalidArrayError("mask values must be real and finite")
    try:
        steps = np.asarray(spacing, dtype=np.float64)
    except (TypeError, ValueError) as error:
        raise InvalidArrayError("spacing must be a sequence of numbers") from error
    if steps.shape != (array.ndim,):
        raise InvalidArrayError(
            f"spacing must have one value per axis ({array.ndim}), got shape {steps.shape}"
        )
    if not bool((np.isfinite(steps) & (steps > 0)).all()):
        raise InvalidArrayError("spacing must be positive and finite")
    return array != 0, steps


def skeleton_graph(mask: np.ndarray, spacing: Sequence[float]) -> SkeletonGraph:
    """The skeleton graph of a 2D (rows, columns) or 3D (planes, rows, columns) mask.

    ``mask``: boolean or numeric array, nonzero = foreground (vessel). ``spacing``: physical
    size of a pixel per axis, array-axis order, positive and finite; all outputs are in its
    units. A mask without foreground gives an empty graph (0 nodes, 0 edges). The mask needs
    at least one background pixel when it has foreground, since the radius is the distance to
    the background.

    Returns a ``SkeletonGraph``; see the module docstring for the method. Raises
    ``InvalidArrayError`` for a mask that is not a non-empty 2D/3D real array with finite
    values, a mask that is all foreground, or a spacing that does not have one positive
    finite value per axis.
    """
    foreground, steps = _check(mask, spacing)
    ndim = foreground.ndim
    if not foreground.any():
        return _empty(ndim)
    if foreground.all():
        # scipy's transform has no background to measure to and returns meaningless values.
        raise InvalidArrayError("mask must have at least one background pixel")

    skeleton = np.asarray(skeletonize(foreground), dtype=np.bool_)  # type: ignore[no-untyped-call]
    # A one-pixel background border: every neighbour of a skeleton pixel has a flat index in
    # the padded array, so shifts are plain additions with no wrap-around.
    padded = np.pad(skeleton, 1)
    strides = np.array(
        [int(np.prod(padded.shape[axis + 1 :])) for axis in range(ndim)], dtype=np.int64
    )
    flat = np.flatnonzero(padded)
    count = len(flat)
    index = np.full(padded.size, -1, dtype=np.int64)
    index[flat] = np.arange(count, dtype=np.int64)

    sources, targets = [], []
    for offset in _half_offsets(ndim):
        partner = index[flat + offset @ strides]
        found = partner >= 0
        shortcut = np.zeros(int(found.sum()), dtype=bool)
        for witness in _witnesses(offset):
            shortcut |= index[flat[found] + witness @ strides] >= 0
        kept = np.flatnonzero(found)[~shortcut]
        sources.append(kept)
        targets.append(partner[kept])
    # Positive offsets raise the flat index, so every pair comes out as (low, high) already.
    source = np.concatenate(sources)
    target = np.concatenate(targets)

    positions = np.stack(np.unravel_index(flat, padded.shape), axis=1) - 1
    pixel_coordinates = positions * steps
    distance = distance_transform_edt(foreground, sampling=steps)
    pixel_radius = np.asarray(distance[tuple(positions.T)], dtype=np.float64)

    degree = np.bincount(source, minlength=count) + np.bincount(target, minlength=count)
    junction = degree >= 3
    inner = junction[source] & junction[target]
    adjacency = coo_matrix(
        (np.ones(int(inner.sum()), dtype=np.int8), (source[inner], target[inner])),
        shape=(count, count),
    )
    _, labels = connected_components(adjacency, directed=False)
    node = _number_by_first_pixel(np.asarray(labels, dtype=np.int64))
    nodes = int(node.max()) + 1

    members = np.bincount(node, minlength=nodes).astype(np.float64)
    sums = [
        np.bincount(node, weights=pixel_coordinates[:, axis], minlength=nodes)
        for axis in range(ndim)
    ]
    coordinates = np.stack(sums, axis=1) / members[:, None]
    radius = np.full(nodes, -np.inf)
    np.maximum.at(radius, node, pixel_radius)

    low = np.minimum(node[source], node[target])
    high = np.maximum(node[source], node[target])
    between = low != high
    keys = np.unique(low[between] * nodes + high[between])  # sorted, so rows come out sorted
    edges = np.stack([keys // nodes, keys % nodes], axis=1).astype(np.int64)
    lengths = np.linalg.norm(coordinates[edges[:, 1]] - coordinates[edges[:, 0]], axis=1)

    return SkeletonGraph(
        coordinates=coordinates,
        edges=edges,
        lengths=lengths,
        radius=radius,
        pixels=np.ravel_multi_index(tuple(positions.T), skeleton.shape).astype(np.int64),
        pixel_nodes=node,
    )


def _number_by_first_pixel(labels: np.ndarray) -> np.ndarray:
    """Relabel clusters 0..N-1 in increasing order of their smallest member, so the node
    order does not depend on how connected_components happens to number them."""
    values, first = np.unique(labels, return_index=True)
    rank = np.empty(int(values.max()) + 1, dtype=np.int64)
    rank[values[np.argsort(first)]] = np.arange(len(values), dtype=np.int64)
    numbered: np.ndarray = rank[labels]
    return numbered


def _empty(ndim: int) -> SkeletonGraph:
    return SkeletonGraph(
        coordinates=np.zeros((0, ndim), dtype=np.float64),
        edges=np.zeros((0, 2), dtype=np.int64),
        lengths=np.zeros(0, dtype=np.float64),
        radius=np.zeros(0, dtype=np.float64),
        pixels=np.zeros(0, dtype=np.int64),
        pixel_nodes=np.zeros(0, dtype=np.int64),
    )
