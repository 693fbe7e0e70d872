"""Skeleton graphs of masks: topology against geometry and networkx, pixels against
scikit-image's skeletonize, radii against scipy's distance transform, lengths against the
triangle inequality and worked examples."""

import math
import time

import networkx as nx
import numpy as np
import pytest
from scipy import ndimage
from skimage.draw import line_nd
from skimage.morphology import skeletonize

from workers.core.errors import InvalidArrayError
from workers.core.skeleton_graph import SkeletonGraph, skeleton_graph


def as_networkx(graph: SkeletonGraph) -> nx.Graph:
    """Reference graph: networkx built from the returned nodes and edges."""
    reference = nx.Graph()
    reference.add_nodes_from(range(len(graph.coordinates)))
    reference.add_edges_from(graph.edges.tolist())
    assert reference.number_of_edges() == len(graph.edges)  # no duplicate rows
    return reference


def shape_counts(graph: SkeletonGraph) -> dict[str, int]:
    """Components, independent cycles, branch points (degree >= 3) and tips (degree 1), by
    networkx."""
    reference = as_networkx(graph)
    degrees = np.array([degree for _, degree in reference.degree()], dtype=np.int64)
    return {
        "components": nx.number_connected_components(reference),
        "cycles": len(nx.cycle_basis(reference)),
        "branch_points": int((degrees >= 3).sum()),
        "tips": int((degrees == 1).sum()),
    }


def assert_well_formed(graph: SkeletonGraph, mask: np.ndarray, spacing: tuple[float, ...]) -> None:
    """What every graph must satisfy, against skimage's skeleton and scipy's transform."""
    skeleton = skeletonize(mask != 0)
    nodes, ndim = graph.coordinates.shape
    assert ndim == mask.ndim
    assert graph.coordinates.dtype == graph.lengths.dtype == graph.radius.dtype == np.float64
    assert graph.edges.dtype == graph.pixels.dtype == graph.pixel_nodes.dtype == np.int64
    # The nodes partition exactly the pixels of skimage's skeleton.
    np.testing.assert_array_equal(graph.pixels, np.flatnonzero(skeleton))
    assert set(graph.pixel_nodes.tolist()) == set(range(nodes))
    if len(graph.edges):
        assert (graph.edges[:, 0] < graph.edges[:, 1]).all()
    # Each node sits at the mean of its pixel centres (index * spacing); its radius is the
    # largest distance transform (scipy, sampling=spacing) over them.
    centres = np.stack(np.unravel_index(graph.pixels, mask.shape), axis=1) * np.asarray(spacing)
    distance = ndimage.distance_transform_edt(mask != 0, sampling=spacing).ravel()[graph.pixels]
    for node in range(nodes):
        mine = graph.pixel_nodes == node
        np.testing.assert_allclose(graph.coordinates[node], centres[mine].mean(axis=0))
        assert graph.radius[node] == distance[mine].max()
    # Lengths are Euclidean distances between the end nodes.
    ends = graph.coordinates[graph.edges]
    np.testing.assert_allclose(graph.lengths, np.linalg.norm(ends[:, 1] - ends[:, 0], axis=1))
    # Neither shortcut removal nor merging may change connectivity: as many components as
    # scipy.ndimage.label finds in the skeleton with 8 (2D) / 26 (3D) connectivity.
    pieces = ndimage.label(skeleton, structure=np.ones((3,) * mask.ndim))[1]
    assert nx.number_connected_components(as_networkx(graph)) == pieces


def capsule(
    shape: tuple[int, ...], start: tuple[float, ...], end: tuple[float, ...], radius: float
) -> np.ndarray:
    """Pixels whose centre lies within ``radius`` of the segment start-end (a tube with
    rounded ends)."""
    centres = np.indices(shape).reshape(len(shape), -1).T.astype(np.float64)
    a, b = np.asarray(start, dtype=np.float64), np.asarray(end, dtype=np.float64)
    t = np.clip((centres - a) @ (b - a) / ((b - a) @ (b - a)), 0.0, 1.0)
    gaps = np.linalg.norm(centres - (a + t[:, None] * (b - a)), axis=1)
    mask: np.ndarray = (gaps <= radius).reshape(shape)
    return mask


def branching_tubes(shape: tuple[int, ...], segments: int, radius: float, seed: int) -> np.ndarray:
    """A random tree of straight segments, each starting on an earlier one, thickened to
    tubes of ``radius`` pixels (crossings may close loops)."""
    rng = np.random.default_rng(seed)
    centreline = np.zeros(shape, dtype=bool)
    starts = [np.asarray(shape, dtype=np.float64) / 2]
    upper = np.asarray(shape, dtype=np.float64) - 1
    for _ in range(segments):
        a = starts[rng.integers(len(starts))]
        b = np.clip(a + rng.normal(0.0, shape[0] / 6, len(shape)), 0.0, upper)
        centreline[line_nd(a, b, endpoint=True)] = True
        starts.extend(a + t * (b - a) for t in (0.25, 0.5, 0.75, 1.0))
    mask: np.ndarray = ndimage.distance_transform_edt(~centreline) <= radius
    return mask


# --- topology against geometry ----------------------------------------------------------------


def test_annulus_gives_one_cycle_and_no_branch_points() -> None:
    # Geometry (common practice): an annulus deformation-retracts onto a circle, so its
    # skeleton graph is one cycle: E - V + b0 = 1, one networkx cycle basis element.
    rows, columns = np.indices((80, 80))
    radius = np.hypot(rows - 39.5, columns - 39.5)
    mask = (radius >= 20) & (radius <= 26)
    graph = skeleton_graph(mask, (1.0, 1.0))
    assert_well_formed(graph, mask, (1.0, 1.0))
    counts = shape_counts(graph)
    assert counts == {"components": 1, "cycles": 1, "branch_points": 0, "tips": 0}
    assert len(graph.edges) - len(graph.coordinates) + counts["components"] == 1


def test_plus_sign_has_one_branch_point_and_four_tips() -> None:
    # Geometry (common practice): a cross is contractible with four arms. Two flat-ended bars
    # 7 px wide, arms 30 px beyond the central square; skimage's Zhang-Suen thinning leaves no
    # spurs at these ends, so no rounding of the ends and no pruning was needed.
    mask = np.zeros((81, 81), dtype=bool)
    mask[37:44, 7:74] = True
    mask[7:74, 37:44] = True
    graph = skeleton_graph(mask, (1.0, 1.0))
    assert_well_formed(graph, mask, (1.0, 1.0))
    assert shape_counts(graph) == {"components": 1, "cycles": 0, "branch_points": 1, "tips": 4}


@pytest.mark.parametrize("inside", [True, False], ids=["ends-inside", "ends-on-border"])
def test_tube_with_side_branch_has_one_branch_point_and_three_tips(inside: bool) -> None:
    # Geometry (common practice): a T of two cylinders (radius 4 voxels, flat ends) is
    # contractible with three ends, whether the ends stop inside the volume or at its border.
    planes, rows, columns = np.indices((64, 64, 64))
    low, high = (8, 56) if inside else (0, 63)
    main = (np.hypot(rows - 32, columns - 32) <= 4) & (planes >= low) & (planes <= high)
    side = (np.hypot(planes - 32, rows - 32) <= 4) & (columns >= 32) & (columns <= high)
    mask = main | side
    graph = skeleton_graph(mask, (1.0, 1.0, 1.0))
    assert_well_formed(graph, mask, (1.0, 1.0, 1.0))
    assert shape_counts(graph) == {"components": 1, "cycles": 0, "branch_points": 1, "tips": 3}


# --- worked examples --------------------------------------------------------------------------


def test_hypotenuses_at_a_t_junction_are_dropped() -> None:
    # Worked example: a T of 1-px lines, a bar of 7 pixels along row 1 and a stem of 3 more
    # below its middle (1, 4). The stem's first pixel (2, 4) is an 8-neighbour of (1, 3) and
    # (1, 5), but (1, 4) is closer to each (1) than they are to each other (sqrt 2), so those
    # two edges go: 10 nodes, 9 edges between 4-neighbours, one branch point of degree 3.
    mask = np.zeros((6, 9), dtype=bool)
    mask[1, 1:8] = True
    mask[1:5, 4] = True
    assert (skeletonize(mask) == mask).all()  # skimage keeps a thin T as it is
    lattice = nx.Graph()  # networkx: the raw 8-adjacency graph has the two triangles
    pixels = [tuple(p) for p in np.argwhere(mask).tolist()]
    lattice.add_edges_from(
        (p, q)
        for p in pixels
        for q in pixels
        if p < q and max(abs(p[0] - q[0]), abs(p[1] - q[1])) == 1
    )
    assert sum(nx.triangles(lattice).values()) == 2 * 3
    spacing = (2.0, 0.5)
    graph = skeleton_graph(mask, spacing)
    assert_well_formed(graph, mask, spacing)
    assert shape_counts(graph) == {"components": 1, "cycles": 0, "branch_points": 1, "tips": 3}
    # 6 steps along the bar of 0.5 each, 3 down the stem of 2.0 each.
    np.testing.assert_allclose(np.sort(graph.lengths), [0.5] * 6 + [2.0] * 3)


def test_adjacent_junction_pixels_merge_into_one_branch_point() -> None:
    # Worked example: two touching pixels (4, 5) and (4, 6), each with three neighbours (two
    # diagonal arms each), become one node at their mean (4, 5.5) * spacing, with four arms.
    mask = np.zeros((9, 12), dtype=bool)
    for k in range(1, 4):
        mask[4 - k, 5 - k] = mask[4 + k, 5 - k] = mask[4 - k, 6 + k] = mask[4 + k, 6 + k] = True
    mask[4, 5] = mask[4, 6] = True
    assert (skeletonize(mask) == mask).all()  # skimage keeps this thin figure as it is
    spacing = (2.0, 0.5)
    graph = skeleton_graph(mask, spacing)
    assert_well_formed(graph, mask, spacing)
    assert len(graph.coordinates) == mask.sum() - 1
    branch = int(
        graph.pixel_nodes[
            np.flatnonzero(graph.pixels == np.ravel_multi_index((4, 5), mask.shape))[0]
        ]
    )
    np.testing.assert_allclose(graph.coordinates[branch], [8.0, 2.75])
    arms = graph.edges[(graph.edges == branch).any(axis=1)]
    assert len(arms) == 4
    # Each arm's first pixel is (3 or 5, 4 or 7): offsets (+-1, +-1.5) in pixels from the
    # branch point, (+-2, +-0.75) in physical units.
    arm_lengths = np.sort(graph.lengths[(graph.edges == branch).any(axis=1)])
    np.testing.assert_allclose(arm_lengths, [math.hypot(2, 0.75)] * 4)
    assert shape_counts(graph) == {"components": 1, "cycles": 0, "branch_points": 1, "tips": 4}


# --- lengths and radii ------------------------------------------------------------------------


@pytest.mark.parametrize("spacing", [(1.0, 1.0), (2.0, 0.5)])
def test_straight_line_length_scales_with_the_spacing_along_it(
    spacing: tuple[float, float],
) -> None:
    # Worked example: a 1-px line of n pixels is its own skeleton; its length is
    # (n - 1) * the spacing along the line.
    n = 40
    along_rows = np.zeros((n + 2, 5), dtype=bool)
    along_rows[1 : n + 1, 2] = True
    along_columns = along_rows.T.copy()
    for mask, step in ((along_rows, spacing[0]), (along_columns, spacing[1])):
        graph = skeleton_graph(mask, spacing)
        assert_well_formed(graph, mask, spacing)
        assert graph.lengths.sum() == pytest.approx((n - 1) * step, rel=1e-12)


@pytest.mark.parametrize("spacing", [(1.0, 1.0), (2.0, 0.5)])
def test_bar_length_is_its_skeleton_extent(spacing: tuple[float, float]) -> None:
    # Triangle inequality: a cycle-free path whose pixels span e columns and h rows has length
    # between e * spacing[1] and e * spacing[1] + h * spacing[0]. skimage's skeleton gives e, h.
    mask = np.zeros((27, 81), dtype=bool)
    mask[10:17, 10:71] = True
    graph = skeleton_graph(mask, spacing)
    assert_well_formed(graph, mask, spacing)
    assert shape_counts(graph)["cycles"] == 0
    pixels = np.argwhere(skeletonize(mask))
    extent = pixels[:, 1].max() - pixels[:, 1].min()
    height = pixels[:, 0].max() - pixels[:, 0].min()
    total = graph.lengths.sum()
    assert extent * spacing[1] - 1e-9 <= total <= extent * spacing[1] + height * spacing[0] + 1e-9
    assert extent >= 50  # the skeleton spans most of the 61 px bar


@pytest.mark.parametrize("spacing", [(1.0, 1.0, 1.0), (1.0, 0.5, 0.5), (0.5, 1.0, 1.0)])
def test_median_radius_of_a_tube_is_its_radius(spacing: tuple[float, float, float]) -> None:
    # Distance transform definition: on the axis of a rasterised cylinder of physical radius r
    # the nearest background centre lies just beyond r, within one voxel.
    r = 4.0
    planes, rows, columns = np.indices((64, 64, 64))
    across = np.hypot((rows - 32) * spacing[1], (columns - 32) * spacing[2])
    mask = (across <= r) & (planes >= 8) & (planes <= 56)
    graph = skeleton_graph(mask, spacing)
    assert_well_formed(graph, mask, spacing)
    assert abs(float(np.median(graph.radius)) - r) <= max(spacing)


# --- small and empty masks --------------------------------------------------------------------


@pytest.mark.parametrize("shape", [(6, 7), (4, 5, 6)])
def test_empty_mask_gives_an_empty_graph(shape: tuple[int, ...]) -> None:
    # Convention (documented): no foreground, no nodes.
    graph = skeleton_graph(np.zeros(shape, dtype=np.uint8), (1.0,) * len(shape))
    assert graph.coordinates.shape == (0, len(shape))
    assert graph.edges.shape == (0, 2)
    assert len(graph.lengths) == len(graph.radius) == len(graph.pixels) == 0


@pytest.mark.parametrize("spacing", [(1.5, 0.5), (1.0, 2.0, 0.25)])
def test_single_pixel_is_one_node_with_the_smallest_spacing_as_radius(
    spacing: tuple[float, ...],
) -> None:
    # Distance transform definition: the nearest background centre of a lone pixel is its
    # neighbour along the axis of smallest spacing.
    shape = (5,) * len(spacing)
    mask = np.zeros(shape, dtype=np.int32)
    mask[(2,) * len(spacing)] = 7  # nonzero = foreground
    graph = skeleton_graph(mask, spacing)
    assert_well_formed(graph, mask, spacing)
    assert graph.edges.shape == (0, 2)
    np.testing.assert_allclose(graph.coordinates, [[2 * s for s in spacing]])
    assert graph.radius.tolist() == [min(spacing)]


def test_small_blobs_thin_to_isolated_nodes() -> None:
    # skimage's Zhang-Suen thins a disc of radius 2.5 px to one pixel; each stays a node.
    rows, columns = np.indices((30, 40))
    mask = np.zeros((30, 40), dtype=bool)
    for r, c in ((6, 6), (6, 30), (20, 15)):
        mask |= np.hypot(rows - r, columns - c) <= 2.5
    assert skeletonize(mask).sum() == 3
    graph = skeleton_graph(mask, (1.0, 1.0))
    assert_well_formed(graph, mask, (1.0, 1.0))
    assert len(graph.coordinates) == 3 and graph.edges.shape == (0, 2)


# --- invalid input ----------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("mask", "spacing"),
    [
        (np.ones(5, dtype=bool), (1.0,)),
        (np.ones((2, 2, 2, 2), dtype=bool), (1.0,) * 4),
        (np.zeros((0, 4), dtype=bool), (1.0, 1.0)),
        (np.array([[0.0, np.nan], [1.0, 0.0]]), (1.0, 1.0)),
        (np.array([[0.0, np.inf], [1.0, 0.0]]), (1.0, 1.0)),
        (np.array([["a", "b"], ["c", "d"]]), (1.0, 1.0)),
        (np.array([[1j, 0], [0, 0]]), (1.0, 1.0)),
        (np.ones((4, 4), dtype=bool), (1.0, 1.0)),  # no background to measure radii to
        (np.eye(4, dtype=bool), (1.0,)),
        (np.eye(4, dtype=bool), (1.0, 1.0, 1.0)),
        (np.eye(4, dtype=bool), (1.0, 0.0)),
        (np.eye(4, dtype=bool), (-1.0, 1.0)),
        (np.eye(4, dtype=bool), (1.0, np.nan)),
        (np.eye(4, dtype=bool), (np.inf, 1.0)),
        (np.eye(4, dtype=bool), ("a", 1.0)),
    ],
)
def test_invalid_input_is_refused(mask: np.ndarray, spacing: tuple[object, ...]) -> None:
    with pytest.raises(InvalidArrayError):
        skeleton_graph(mask, spacing)  # type: ignore[arg-type]


# --- larger patterns (timed once, no timed asserts) -------------------------------------------


@pytest.mark.parametrize(
    ("shape", "segments", "radius", "spacing"),
    [((512, 512), 60, 3.5, (0.7, 1.3)), ((128, 128, 128), 30, 3.0, (2.0, 1.0, 1.0))],
    ids=["512x512", "128^3"],
)
def test_branching_tubes(
    shape: tuple[int, ...], segments: int, radius: float, spacing: tuple[float, ...]
) -> None:
    mask = branching_tubes(shape, segments, radius, seed=0)
    start = time.perf_counter()
    graph = skeleton_graph(mask, spacing)
    elapsed = time.perf_counter() - start
    print(f"skeleton_graph {shape}: {elapsed:.3f} s, {len(graph.coordinates)} nodes")
    assert_well_formed(graph, mask, spacing)
    counts = shape_counts(graph)
    assert counts["branch_points"] > 0 and counts["tips"] > 0
