"""Network descriptors against networkx, a pure-Python segment walk, and closed forms."""

import math
import statistics
from collections.abc import Callable

import networkx as nx
import numpy as np
import pytest

from workers.core.errors import InvalidArrayError, ParameterError
from workers.core.network import (
    NetworkDescriptors,
    clean_edges,
    edge_lengths,
    equal_shells,
    network_descriptors,
    shell_descriptors,
)


def graph_arrays(graph: nx.Graph, dim: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Coordinates (from the "pos" attribute, else random) and edges of a graph on 0..n-1."""
    n = graph.number_of_nodes()
    assert sorted(graph.nodes) == list(range(n))
    if all("pos" in data for _, data in graph.nodes(data=True)) and n:
        coordinates = np.array([graph.nodes[v]["pos"] for v in range(n)], dtype=np.float64)
    else:
        coordinates = np.random.default_rng(seed).random((n, dim))
    edges = np.array(list(graph.edges()), dtype=np.int64).reshape(-1, 2)
    return coordinates, edges


def walk_segments(
    n: int, edges: np.ndarray, lengths: np.ndarray
) -> list[tuple[float, int | None, int | None]]:
    """Reference by definition: segments as maximal paths through degree-2 nodes, found by
    walking the graph one edge at a time. Open segments are (length, start, end); a cycle of
    degree-2 nodes is (length, None, None)."""
    incident: list[list[tuple[int, int]]] = [[] for _ in range(n)]
    for e, (u, v) in enumerate(edges.tolist()):
        incident[u].append((v, e))
        incident[v].append((u, e))
    used = [False] * len(edges)
    segments: list[tuple[float, int | None, int | None]] = []

    def follow(start: int, node: int, edge: int) -> tuple[float, int]:
        # From `start` along `edge` to `node`, then on through degree-2 nodes.
        used[edge] = True
        length = float(lengths[edge])
        while len(incident[node]) == 2 and node != start:
            node, edge = next((w, f) for w, f in incident[node] if f != edge)
            if used[edge]:
                break
            used[edge] = True
            length += float(lengths[edge])
        return length, node

    for v in range(n):
        if len(incident[v]) != 2:
            for w, e in incident[v]:
                if not used[e]:
                    length, end = follow(v, w, e)
                    segments.append((length, v, end))
    for e, (u, v) in enumerate(edges.tolist()):
        if not used[e]:  # what is left lies on cycles of degree-2 nodes
            length, _ = follow(u, v, e)
            segments.append((length, None, None))
    return segments


def reference_segment_values(
    coordinates: np.ndarray, edges: np.ndarray, lengths: np.ndarray
) -> tuple[int, float | None, float | None, float | None]:
    """(count, mean length, median length, mean tortuosity) from ``walk_segments``."""
    segments = walk_segments(len(coordinates), edges, lengths)
    values = [length for length, _, _ in segments]
    ratios = []
    for length, start, end in segments:
        if start is not None and end is not None and start != end:
            chord = math.dist(coordinates[start].tolist(), coordinates[end].tolist())
            if chord > 0:
                ratios.append(length / chord)
    return (
        len(segments),
        statistics.fmean(values) if values else None,
        statistics.median(values) if values else None,
        statistics.fmean(ratios) if ratios else None,
    )


def assert_matches_networkx(graph: nx.Graph, ours: NetworkDescriptors) -> None:
    # Reference library networkx: components, cycle basis, degrees, weighted size.
    degrees = [d for _, d in graph.degree()]
    assert ours.node_count == graph.number_of_nodes()
    assert ours.edge_count == graph.number_of_edges()
    assert ours.component_count == nx.number_connected_components(graph)
    assert ours.cycle_count == len(nx.cycle_basis(graph))
    assert ours.tip_count == sum(d == 1 for d in degrees)
    assert ours.branch_point_count == sum(d >= 3 for d in degrees)
    assert ours.total_length == pytest.approx(graph.size(weight="weight"), rel=1e-12)


def random_graphs() -> list[object]:
    graphs = []
    for seed in range(4):
        # A free cycle of degree-2 nodes appended, so closed segments occur too.
        g = nx.disjoint_union(nx.gnm_random_graph(60, 70 + 10 * seed, seed=seed), nx.cycle_graph(5))
        graphs.append(pytest.param(f"gnm-{seed}", g, 2 + seed % 2, id=f"gnm-{seed}"))
    for seed in range(4):
        g = nx.random_geometric_graph(
            80, 0.16 if seed % 2 == 0 else 0.3, seed=seed + 10, dim=2 + seed % 2
        )
        graphs.append(pytest.param(f"geometric-{seed}", g, 2 + seed % 2, id=f"geometric-{seed}"))
    for seed in range(3):
        tree = nx.random_labeled_tree(50, seed=seed + 20)
        graphs.append(pytest.param(f"tree-{seed}", tree, 3, id=f"tree-{seed}"))
        forest = nx.random_labeled_rooted_forest(60, seed=seed + 30)
        graphs.append(pytest.param(f"forest-{seed}", forest, 2, id=f"forest-{seed}"))
    return graphs


@pytest.mark.parametrize(("name", "graph", "dim"), random_graphs())
def test_random_graphs_match_networkx_and_walk(name: str, graph: nx.Graph, dim: int) -> None:
    coordinates, edges = graph_arrays(graph, dim, seed=len(name))
    rng = np.random.default_rng(sum(map(ord, name)))
    if name.startswith("geometric"):
        lengths = edge_lengths(coordinates, edges)
    else:  # lengths along the vessel, longer than the chords
        lengths = edge_lengths(coordinates, edges) * rng.uniform(1.0, 2.0, len(edges))
    for (u, v), length in zip(edges.tolist(), lengths.tolist(), strict=True):
        graph.edges[u, v]["weight"] = length
    ours = network_descriptors(coordinates, edges, lengths)
    assert_matches_networkx(graph, ours)
    # Reference by definition: the pure-Python walk above.
    count, mean, median, tortuosity = reference_segment_values(coordinates, edges, lengths)
    assert ours.segment_count == count
    assert ours.mean_segment_length == pytest.approx(mean, rel=1e-12)
    assert ours.median_segment_length == pytest.approx(median, rel=1e-12)
    assert ours.mean_tortuosity == pytest.approx(tortuosity, rel=1e-12)


def test_isolated_nodes_are_components() -> None:
    # Reference library networkx: an isolated node is a connected component of its own.
    graph = nx.path_graph(4)
    graph.add_nodes_from([4, 5, 6])
    coordinates, edges = graph_arrays(graph, 2, seed=1)
    ours = network_descriptors(coordinates, edges, edge_lengths(coordinates, edges))
    assert ours.component_count == nx.number_connected_components(graph) == 4
    assert ours.cycle_count == 0 and ours.segment_count == 1


def line(points: list[list[float]]) -> tuple[np.ndarray, np.ndarray]:
    coordinates = np.array(points, dtype=np.float64)
    edges = np.column_stack([np.arange(len(points) - 1), np.arange(1, len(points))])
    return coordinates, edges.astype(np.int64)


def test_path_of_five_nodes() -> None:
    # Worked example: one segment, two tips, no branch point, tortuosity 1 (straight line).
    coordinates, edges = line([[0, 0], [1, 0], [2, 0], [3, 0], [4, 0]])
    ours = network_descriptors(coordinates, edges, edge_lengths(coordinates, edges))
    assert (ours.segment_count, ours.tip_count, ours.branch_point_count) == (1, 2, 0)
    assert (ours.component_count, ours.cycle_count) == (1, 0)
    assert ours.mean_segment_length == ours.median_segment_length == pytest.approx(4.0)
    assert ours.mean_tortuosity == pytest.approx(1.0, rel=1e-15)


def test_star_with_three_arms() -> None:
    # Worked example: a centre with arms of 2, 2 and 1 edges (unit steps): three segments of
    # lengths 2, 2, 1, one branch point, three tips, every arm straight.
    coordinates = np.array([[0, 0], [1, 0], [2, 0], [0, 1], [0, 2], [-1, 0]], dtype=np.float64)
    edges = np.array([[0, 1], [1, 2], [0, 3], [3, 4], [0, 5]], dtype=np.int64)
    ours = network_descriptors(coordinates, edges, edge_lengths(coordinates, edges))
    assert (ours.segment_count, ours.branch_point_count, ours.tip_count) == (3, 1, 3)
    assert ours.mean_segment_length == pytest.approx(5 / 3)
    assert ours.median_segment_length == pytest.approx(2.0)
    assert ours.mean_tortuosity == pytest.approx(1.0)


def test_isolated_triangle_is_one_closed_segment() -> None:
    # Worked example: a triangle is one cycle (b1 = 3 - 3 + 1) and one closed segment, which
    # has no ends and so no tortuosity.
    coordinates = np.array([[0, 0], [1, 0], [0, 1]], dtype=np.float64)
    edges = np.array([[0, 1], [1, 2], [2, 0]], dtype=np.int64)
    ours = network_descriptors(coordinates, edges, np.array([1.0, 2.0, 3.0]))
    assert (ours.segment_count, ours.cycle_count, ours.component_count) == (1, 1, 1)
    assert (ours.tip_count, ours.branch_point_count) == (0, 0)
    assert ours.mean_segment_length == ours.median_segment_length == 6.0
    assert ours.mean_tortuosity is None


def test_lollipop() -> None:
    # Worked example: a square 0-1-2-3-0 with a tail 0-4-5-6 bent at 5 by a right angle.
    # Segments: the loop (both ends at node 0, left out of tortuosity) and the tail.
    coordinates = np.array(
        [[0, 0], [0, -1], [-1, -1], [-1, 0], [1, 0], [2, 0], [2, 1]], dtype=np.float64
    )
    edges = np.array([[0, 1], [1, 2], [2, 3], [3, 0], [0, 4], [4, 5], [5, 6]], dtype=np.int64)
    ours = network_descriptors(coordinates, edges, edge_lengths(coordinates, edges))
    assert (ours.segment_count, ours.cycle_count, ours.component_count) == (2, 1, 1)
    assert (ours.tip_count, ours.branch_point_count) == (1, 1)
    assert ours.mean_segment_length == pytest.approx((4 + 3) / 2)
    # Tail: path length 3, chord from (0, 0) to (2, 1) of length sqrt(5).
    assert ours.mean_tortuosity == pytest.approx(3 / math.sqrt(5))


def test_right_angle_gives_sqrt_two() -> None:
    # Closed form: two unit edges at a right angle, chord sqrt(2), tortuosity 2 / sqrt(2).
    coordinates, edges = line([[0, 0], [1, 0], [1, 1]])
    ours = network_descriptors(coordinates, edges, edge_lengths(coordinates, edges))
    assert ours.mean_tortuosity == pytest.approx(math.sqrt(2), rel=1e-15)


def test_straight_path_in_3d_has_tortuosity_one() -> None:
    # Closed form: points along one line, lengths = chords, length / distance = 1.
    t = np.sort(np.random.default_rng(3).random(30))
    coordinates = np.outer(t, [1.0, -2.0, 0.5])
    edges = np.column_stack([np.arange(29), np.arange(1, 30)])
    ours = network_descriptors(coordinates, edges, edge_lengths(coordinates, edges))
    assert ours.mean_tortuosity == pytest.approx(1.0, rel=1e-12)


def test_half_circle_tends_to_half_pi() -> None:
    # Geometry (common practice): a half circle of radius r has arc pi r over a chord 2 r,
    # so pi / 2. Sampled by N chords the polygon has length 2 N r sin(pi / 2N) (closed form),
    # which tends to pi r.
    for count in (10, 100, 2000):
        angles = np.linspace(0.0, np.pi, count + 1)
        coordinates, edges = line(np.column_stack([np.cos(angles), np.sin(angles)]).tolist())
        chords = network_descriptors(coordinates, edges, edge_lengths(coordinates, edges))
        assert chords.mean_tortuosity == pytest.approx(count * math.sin(math.pi / (2 * count)))
        arcs = network_descriptors(coordinates, edges, np.full(count, np.pi / count))
        assert arcs.mean_tortuosity == pytest.approx(math.pi / 2, rel=1e-12)
    assert chords.mean_tortuosity == pytest.approx(math.pi / 2, rel=1e-6)


def test_segment_with_ends_at_one_position_is_left_out() -> None:
    # Definition: a segment whose two ends coincide in space has no end-to-end distance.
    # Two branch points at the same position (0, 0) joined by a bent path 0-2-1, each with
    # two tips; only the four tip segments count.
    coordinates = np.array(
        [[0, 0], [0, 0], [1, 1], [-1, 0], [0, -1], [0, 1], [1, -1]], dtype=np.float64
    )
    edges = np.array([[0, 2], [2, 1], [0, 3], [0, 4], [1, 5], [1, 6]], dtype=np.int64)
    lengths = np.array([1.5, 1.5, 1.0, 1.0, 1.0, 2.0])
    ours = network_descriptors(coordinates, edges, lengths)
    assert ours.segment_count == 5
    # Tips: (0,0)-(-1,0) 1/1, (0,0)-(0,-1) 1/1, (0,0)-(0,1) 1/1, (0,0)-(1,-1) 2/sqrt(2).
    assert ours.mean_tortuosity == pytest.approx((3 + math.sqrt(2)) / 4)


def test_extent_along_a_direction() -> None:
    # Worked example: projections of known points on a unit vector.
    coordinates = np.array([[0, 0, 0], [1, 1, 0], [2, 0, 5], [0, 3, -1]], dtype=np.float64)
    edges = np.array([[0, 1], [1, 2]], dtype=np.int64)
    lengths = edge_lengths(coordinates, edges)
    assert network_descriptors(coordinates, edges, lengths).extent is None
    along_z = network_descriptors(coordinates, edges, lengths, direction=[0, 0, 1])
    assert along_z.extent == 6.0
    # On (1, 1, 0) / sqrt(2): 0, sqrt(2), sqrt(2), 3 / sqrt(2).
    diagonal = np.array([1.0, 1.0, 0.0]) / math.sqrt(2)
    ours = network_descriptors(coordinates, edges, lengths, direction=diagonal)
    assert ours.extent == pytest.approx(3 / math.sqrt(2))


def test_mean_radius_weighted_by_length() -> None:
    # Worked example: edge radii (1 + 3) / 2 = 2 over length 1 and (3 + 5) / 2 = 4 over
    # length 3: (2 * 1 + 4 * 3) / 4 = 3.5.
    coordinates, edges = line([[0, 0], [1, 0], [4, 0]])
    radius = np.array([1.0, 3.0, 5.0])
    lengths = edge_lengths(coordinates, edges)
    assert network_descriptors(coordinates, edges, lengths, radius=radius).mean_radius == 3.5
    assert network_descriptors(coordinates, edges, lengths).mean_radius is None
    zero = network_descriptors(coordinates, edges, np.zeros(2), radius=radius)
    assert zero.mean_radius is None and zero.total_length == 0.0


def test_empty_graph_has_no_means() -> None:
    # Definition: means and medians of empty sets are None, never NaN.
    ours = network_descriptors(
        np.zeros((0, 3)),
        np.zeros((0, 2), dtype=np.int64),
        np.zeros(0),
        direction=[1, 0, 0],
        radius=np.zeros(0),
    )
    assert ours.as_dict() == {
        "node_count": 0,
        "edge_count": 0,
        "segment_count": 0,
        "tip_count": 0,
        "branch_point_count": 0,
        "component_count": 0,
        "cycle_count": 0,
        "total_length": 0.0,
        "mean_segment_length": None,
        "median_segment_length": None,
        "mean_tortuosity": None,
        "extent": None,
        "mean_radius": None,
    }
    nodes_only = network_descriptors(
        np.zeros((2, 2)), np.zeros((0, 2), dtype=np.int64), np.zeros(0)
    )
    assert (nodes_only.component_count, nodes_only.segment_count) == (2, 0)


def test_as_dict_keys_in_order() -> None:
    # The contract of the task: these keys, in this order.
    coordinates, edges = line([[0, 0], [1, 0]])
    keys = list(network_descriptors(coordinates, edges, np.ones(1)).as_dict())
    assert keys == [
        "node_count",
        "edge_count",
        "segment_count",
        "tip_count",
        "branch_point_count",
        "component_count",
        "cycle_count",
        "total_length",
        "mean_segment_length",
        "median_segment_length",
        "mean_tortuosity",
        "extent",
        "mean_radius",
    ]


def test_edge_lengths_are_euclidean() -> None:
    # Closed form: a 3-4-5 triangle, and math.dist on random points.
    assert edge_lengths(np.array([[0.0, 0.0], [3.0, 4.0]]), np.array([[0, 1]])).tolist() == [5.0]
    rng = np.random.default_rng(4)
    coordinates, edges = rng.random((20, 3)), rng.integers(0, 20, (50, 2))
    expected = [math.dist(coordinates[u], coordinates[v]) for u, v in edges.tolist()]
    assert edge_lengths(coordinates, edges) == pytest.approx(expected, rel=1e-14)


def test_clean_edges_by_hand() -> None:
    # Worked example: (1, 0), (0, 1) again and (2, 1) repeat earlier pairs in either
    # orientation; (2, 2) and (3, 3) are self-loops.
    edges = np.array([[0, 1], [1, 0], [2, 2], [1, 2], [0, 1], [3, 3], [2, 1], [3, 0]])
    cleanup = clean_edges(edges)
    assert cleanup.kept.tolist() == [0, 3, 7]
    assert cleanup.edges.tolist() == [[0, 1], [1, 2], [3, 0]]
    assert cleanup.self_loops.tolist() == [2, 5]
    assert cleanup.duplicates.tolist() == [1, 4, 6]
    assert cleanup.kept.dtype == cleanup.self_loops.dtype == cleanup.duplicates.dtype == np.int64


def test_clean_edges_random_against_first_occurrences() -> None:
    # Reference by definition (a dict of first occurrences) and networkx.Graph, which keeps
    # one edge per unordered pair.
    rng = np.random.default_rng(5)
    edges = rng.integers(0, 15, (300, 2))
    first: dict[frozenset[int], int] = {}
    loops = []
    for position, (u, v) in enumerate(edges.tolist()):
        if u == v:
            loops.append(position)
        else:
            first.setdefault(frozenset((u, v)), position)
    cleanup = clean_edges(edges)
    assert cleanup.kept.tolist() == sorted(first.values())
    assert cleanup.self_loops.tolist() == loops
    assert sorted(cleanup.duplicates.tolist()) == sorted(
        set(range(300)) - set(first.values()) - set(loops)
    )
    graph = nx.Graph(edges.tolist())
    graph.remove_edges_from(nx.selfloop_edges(graph))
    assert len(cleanup.edges) == graph.number_of_edges()


def test_shells_by_hand() -> None:
    # Worked example: a path along x at 0..4, isolated nodes at 4.5 and 10, shells
    # [0, 1.5), [1.5, 3), [3, 5) around the origin. Midpoints 0.5 | 1.5, 2.5 | 3.5.
    coordinates = np.array(
        [[0, 0], [1, 0], [2, 0], [3, 0], [4, 0], [4.5, 0], [0, 10]], dtype=np.float64
    )
    edges = np.array([[0, 1], [1, 2], [2, 3], [3, 4]], dtype=np.int64)
    lengths = np.array([1.0, 2.0, 3.0, 4.0])
    shells = shell_descriptors(
        coordinates, edges, lengths, center=[0, 0], boundaries=[0, 1.5, 3, 5], direction=[1, 0]
    )
    assert [s.edge_count for s in shells] == [1, 2, 1]
    assert [s.node_count for s in shells] == [2, 3, 3]
    assert [s.total_length for s in shells] == [1.0, 5.0, 4.0]
    assert [s.component_count for s in shells] == [1, 1, 2]
    assert [s.segment_count for s in shells] == [1, 1, 1]
    assert [s.extent for s in shells] == [1.0, 2.0, 1.5]


@pytest.mark.parametrize(("seed", "dim"), [(0, 2), (1, 3), (2, 2)])
def test_shells_against_networkx_subgraphs(seed: int, dim: int) -> None:
    # Reference library networkx on the subgraph of each shell, chosen here edge by edge with
    # math.dist; shells from equal_shells hold every midpoint, so lengths add up to the whole.
    graph = nx.random_geometric_graph(120, 0.12 if dim == 2 else 0.25, seed=seed, dim=dim)
    coordinates, edges = graph_arrays(graph, dim, seed)
    lengths = edge_lengths(coordinates, edges)
    center = np.full(dim, 0.4)
    boundaries = equal_shells(coordinates, center, 5)
    shells = shell_descriptors(coordinates, edges, lengths, center=center, boundaries=boundaries)
    whole = network_descriptors(coordinates, edges, lengths)
    assert sum(s.total_length for s in shells) == pytest.approx(whole.total_length, rel=1e-12)
    assert sum(s.edge_count for s in shells) == len(edges)
    isolated = [v for v in graph.nodes if graph.degree(v) == 0]
    for shell, ours in enumerate(shells):
        low, high = boundaries[shell], boundaries[shell + 1]
        inside = [
            (u, v)
            for u, v in edges.tolist()
            if low <= math.dist((coordinates[u] + coordinates[v]) / 2, center) < high
        ]
        sub = nx.Graph(inside)
        sub.add_nodes_from(v for v in isolated if low <= math.dist(coordinates[v], center) < high)
        for u, v in inside:
            sub.edges[u, v]["weight"] = math.dist(coordinates[u], coordinates[v])
        assert_matches_networkx(sub, ours)


def test_equal_shells() -> None:
    # Definition: equal widths from 0; the farthest node lies inside the last shell.
    rng = np.random.default_rng(6)
    coordinates = rng.normal(size=(200, 3))
    center = np.array([0.1, -0.2, 0.3])
    boundaries = equal_shells(coordinates, center, 4)
    farthest = max(math.dist(point, center) for point in coordinates.tolist())
    assert len(boundaries) == 5 and boundaries[0] == 0.0
    assert boundaries[-1] == pytest.approx(farthest, rel=1e-15)
    assert np.diff(boundaries) == pytest.approx(np.full(4, boundaries[-1] / 4))
    assert equal_shells(coordinates, center, 3, max_radius=6.0).tolist() == [0, 2, 4, 6]
    edges = np.zeros((0, 2), dtype=np.int64)
    shells = shell_descriptors(
        coordinates, edges, np.zeros(0), center=center, boundaries=boundaries
    )
    assert sum(s.node_count for s in shells) == 200  # every node isolated, each in one shell


@pytest.mark.parametrize(
    ("call", "error"),
    [
        (lambda: edge_lengths(np.zeros((3, 4)), np.array([[0, 1]])), InvalidArrayError),
        (lambda: edge_lengths(np.zeros((3, 2)), np.array([[0, 3]])), InvalidArrayError),
        (lambda: edge_lengths(np.zeros((3, 2)), np.array([[0.0, 1.0]])), InvalidArrayError),
        (lambda: clean_edges(np.array([0, 1, 2])), InvalidArrayError),
        (
            lambda: network_descriptors(np.zeros((3, 2)), np.array([[0, 1]]), np.ones(2)),
            InvalidArrayError,
        ),
        (
            lambda: network_descriptors(np.zeros((3, 2)), np.array([[0, 1]]), -np.ones(1)),
            InvalidArrayError,
        ),
        (
            lambda: network_descriptors(
                np.zeros((3, 2)), np.array([[0, 1]]), np.ones(1), radius=np.ones(2)
            ),
            InvalidArrayError,
        ),
        (
            lambda: network_descriptors(
                np.zeros((3, 2)), np.array([[0, 1]]), np.ones(1), direction=[0, 0, 1]
            ),
            ParameterError,
        ),
        (
            lambda: shell_descriptors(
                np.zeros((3, 2)),
                np.array([[0, 1]]),
                np.ones(1),
                center=[0, 0],
                boundaries=[0, 2, 1],
            ),
            ParameterError,
        ),
        (
            lambda: shell_descriptors(
                np.zeros((3, 2)), np.array([[0, 1]]), np.ones(1), center=[0], boundaries=[0, 1]
            ),
            ParameterError,
        ),
        (lambda: equal_shells(np.ones((3, 2)), [0, 0], 0), ParameterError),
        (lambda: equal_shells(np.zeros((3, 2)), [0, 0], 2), ParameterError),
    ],
)
def test_inconsistent_inputs_are_refused(
    call: Callable[[], object], error: type[Exception]
) -> None:
    # The contract: errors from workers.core.errors on inconsistent shapes and values.
    with pytest.raises(error):
        call()


def test_million_edges() -> None:
    # Size: 10^6 random edges through clean_edges and network_descriptors (not timed here).
    # Reference: degree counts with np.bincount on the cleaned edges (common practice).
    rng = np.random.default_rng(7)
    n = 1_000_000
    coordinates = rng.random((n, 3))
    cleanup = clean_edges(rng.integers(0, n, (1_000_000, 2)))
    lengths = edge_lengths(coordinates, cleanup.edges)
    ours = network_descriptors(
        coordinates, cleanup.edges, lengths, direction=[0, 0, 1], radius=rng.random(n)
    )
    degree = np.bincount(cleanup.edges.ravel(), minlength=n)
    assert (
        ours.edge_count
        == len(cleanup.edges)
        == 10**6 - len(cleanup.self_loops) - len(cleanup.duplicates)
    )
    assert ours.tip_count == int((degree == 1).sum())
    assert ours.branch_point_count == int((degree >= 3).sum())
    assert ours.cycle_count == ours.edge_count - n + ours.component_count
    assert ours.component_count >= int((degree == 0).sum())
    assert ours.mean_tortuosity is not None and ours.mean_tortuosity >= 1.0
