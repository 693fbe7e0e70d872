"""Persistence of filtered graphs against gudhi, networkx, Euler's formula and worked examples."""

import networkx as nx
import numpy as np
import pytest

from tests.support.references import gudhi_graph_diagrams
from workers.core import _graph
from workers.core.errors import InvalidArrayError, ParameterError
from workers.core.graph_persistence import graph_diagrams

INF = np.inf


def assert_same(ours: list[np.ndarray], reference: list[np.ndarray]) -> None:
    assert len(ours) == len(reference)
    for k, (mine, theirs) in enumerate(zip(ours, reference, strict=True)):
        assert mine.dtype == np.float64 and mine.shape == theirs.shape, f"H{k} differs in size"
        np.testing.assert_array_equal(mine, theirs, err_msg=f"H{k}")


def random_graph(
    seed: int, n: int, m: int, *, ties: bool, infinite: float = 0.0, isolated: int = 0
) -> tuple[np.ndarray, np.ndarray]:
    """n nodes, m distinct edges (no self-loops) among the first n - isolated nodes; values
    integers 0..5 (many ties) or normal; a fraction `infinite` of the nodes at +inf."""
    rng = np.random.default_rng(seed)
    joined = n - isolated
    rows, cols = np.triu_indices(joined, k=1)
    chosen = rng.choice(len(rows), size=min(m, len(rows)), replace=False)
    edges = np.column_stack([rows[chosen], cols[chosen]])
    edges = edges[rng.permutation(len(edges))]
    flip = rng.random(len(edges)) < 0.5
    edges[flip] = edges[flip][:, ::-1]  # either endpoint first
    values = rng.integers(0, 6, n).astype(np.float64) if ties else rng.standard_normal(n)
    values[rng.random(n) < infinite] = INF
    return values, edges


CASES = [
    # (seed, nodes, edges, ties, fraction at +inf, isolated nodes)
    (0, 30, 45, False, 0.0, 0),
    (1, 30, 45, True, 0.0, 0),
    (2, 60, 50, True, 0.0, 5),  # sparse: many components
    (3, 60, 150, False, 0.2, 4),
    (4, 80, 200, True, 0.25, 10),
    (5, 200, 180, False, 0.1, 20),
    (6, 500, 2000, True, 0.05, 0),
    (7, 1000, 3000, False, 0.0, 50),
]


@pytest.mark.parametrize(("seed", "n", "m", "ties", "infinite", "isolated"), CASES)
def test_random_graphs_match_gudhi(
    seed: int, n: int, m: int, ties: bool, infinite: float, isolated: int
) -> None:
    # Reference library gudhi (SimplexTree persistence, its own cohomology reduction).
    values, edges = random_graph(seed, n, m, ties=ties, infinite=infinite, isolated=isolated)
    ours = graph_diagrams(values, edges)
    assert_same(ours, gudhi_graph_diagrams(values, edges))
    assert len(ours[0]) > 1 and len(ours[1]) > 0  # something to compare in both dimensions


@pytest.mark.parametrize("seed", [0, 3, 6])
def test_max_dim_zero_and_index_dtypes_match_gudhi(seed: int) -> None:
    # Reference library gudhi: H0 alone, and node indices given as uint16 or int32.
    values, edges = random_graph(seed, 100, 150, ties=True, infinite=0.1, isolated=3)
    reference = gudhi_graph_diagrams(values, edges)
    assert_same(graph_diagrams(values, edges, max_dim=0), reference[:1])
    assert_same(graph_diagrams(values, edges.astype(np.uint16)), reference)
    assert_same(graph_diagrams(values.tolist(), edges.astype(np.int32)), reference)


def betti(diagram: np.ndarray, t: float) -> int:
    """Classes alive at t: birth <= t < death (common practice)."""
    return int(((diagram[:, 0] <= t) & (t < diagram[:, 1])).sum())


@pytest.mark.parametrize("seed", range(6))
def test_euler_formula_at_every_level(seed: int) -> None:
    # Euler's formula for graphs (common practice; the Euler characteristic of a 1-complex
    # is the alternating sum of its Betti numbers): V(t) - E(t) = b0(t) - b1(t) at every
    # level t, with V and E counted directly. It holds for multigraphs too, so self-loops
    # and repeated edges are mixed in.
    rng = np.random.default_rng(100 + seed)
    values, edges = random_graph(seed, 120, 200, ties=seed % 2 == 0, infinite=0.1, isolated=6)
    loops = np.repeat(rng.integers(0, 120, 5)[:, None], 2, axis=1)
    edges = np.concatenate([edges, loops, edges[:7]])
    edge_values = np.maximum(values[edges[:, 0]], values[edges[:, 1]])
    h0, h1 = graph_diagrams(values, edges)
    levels = np.unique(values[np.isfinite(values)])
    for t in levels:
        nodes, links = int((values <= t).sum()), int((edge_values <= t).sum())
        assert nodes - links == betti(h0, t) - betti(h1, t), f"level {t}"
    # Reference library gudhi for H0: loops and repeated edges do not change what connects.
    simple = np.unique(np.sort(edges[edges[:, 0] != edges[:, 1]], axis=1), axis=0)
    assert_same([h0], gudhi_graph_diagrams(values, simple, max_dim=0))


@pytest.mark.parametrize("seed", range(5))
def test_betti_numbers_match_networkx(seed: int) -> None:
    # Reference library networkx on the graph of the nodes that enter: essential H0 classes
    # are its components (number_connected_components), H1 classes the cycles of a cycle
    # basis (cycle_basis, whose size is the cycle rank E - V + components).
    values, edges = random_graph(seed, 150, 170, ties=True, infinite=0.15, isolated=8)
    graph = nx.Graph()
    graph.add_nodes_from(int(v) for v in np.flatnonzero(np.isfinite(values)))
    graph.add_edges_from((int(u), int(v)) for u, v in edges if np.isfinite(values[[u, v]]).all())
    h0, h1 = graph_diagrams(values, edges)
    assert int(np.isinf(h0[:, 1]).sum()) == nx.number_connected_components(graph)
    assert len(h1) == len(nx.cycle_basis(graph))
    assert np.isinf(h1[:, 1]).all()  # nothing kills a cycle in a 1-complex
    assert nx.number_connected_components(graph) > 1 and len(h1) > 0


@pytest.mark.parametrize(
    ("values", "edges", "h0", "h1"),
    [
        # Worked by hand (elder rule, common practice). Path 0 - 1 - 2 with values 0, 2, 1:
        # minima at 0 and 1; both edges enter at 2, where the younger component (born 1) dies.
        ([0.0, 2.0, 1.0], [[0, 1], [1, 2]], [[0, INF], [1, 2]], []),
        # Triangle: one component born at its minimum; the last edge, at the maximum 3,
        # closes the cycle, which nothing kills.
        ([1.0, 3.0, 0.0], [[0, 1], [1, 2], [2, 0]], [[0, INF]], [[3, INF]]),
        # Square 0-1-2-3 with the diagonal 1-3, values 0, 3, 1, 2: the minima 0 and 1 merge at
        # 2 (node 3 and its two edges); node 1 enters at 3 with three edges: one joins, two
        # close cycles.
        (
            [0.0, 3.0, 1.0, 2.0],
            [[0, 1], [1, 2], [2, 3], [3, 0], [1, 3]],
            [[0, INF], [1, 2]],
            [[3, INF], [3, INF]],
        ),
        # The middle node never enters, so the path stays two components, forever.
        ([0.0, INF, 1.0], [[0, 1], [1, 2]], [[0, INF], [1, INF]], []),
        # No edges: every node is a component of its own.
        ([2.0, 0.5], np.zeros((0, 2), dtype=np.int64), [[0.5, INF], [2, INF]], []),
        # A self-loop is an edge whose endpoints are already connected: it closes a cycle.
        ([4.0], [[0, 0]], [[4, INF]], [[4, INF]]),
        # The empty graph has empty diagrams.
        (np.zeros(0), np.zeros((0, 2), dtype=np.int64), [], []),
    ],
)
def test_worked_examples(
    values: list[float], edges: list[list[int]], h0: list[list[float]], h1: list[list[float]]
) -> None:
    ours = graph_diagrams(np.asarray(values), np.asarray(edges))
    expected = [np.asarray(d, dtype=np.float64).reshape(-1, 2) for d in (h0, h1)]
    assert_same(ours, expected)


def test_refused_input() -> None:
    # Our contract (workers.core.errors): a specific error for each unusable input.
    edges = np.array([[0, 1], [1, 2]])
    for bad in (np.nan, -INF):
        with pytest.raises(InvalidArrayError):
            graph_diagrams(np.array([0.0, bad, 1.0]), edges)
    for index in (3, -1):
        with pytest.raises(InvalidArrayError):
            graph_diagrams(np.zeros(3), np.array([[0, 1], [1, index]]))
    for shape_error in (np.zeros((3, 1)), np.zeros((3, 3))):  # values not 1D
        with pytest.raises(InvalidArrayError):
            graph_diagrams(shape_error, edges)
    for wrong_edges in (np.array([0, 1]), np.zeros((2, 3), dtype=int), np.zeros((2, 2))):
        with pytest.raises(InvalidArrayError):
            graph_diagrams(np.zeros(3), wrong_edges)
    for max_dim in (2, -1):
        with pytest.raises(ParameterError) as raised:
            graph_diagrams(np.zeros(3), edges, max_dim=max_dim)
        assert raised.value.field == "/max_dim"  # a pointer into its own arguments


def test_c_core_refuses_malformed_buffers() -> None:
    # Our contract (_graph.c): called directly, the C core checks what it indexes with and
    # raises instead of reading out of bounds.
    values = np.array([0.0, 1.0, 2.0])
    order = np.arange(3, dtype=np.int64)
    edges = np.array([[0, 1], [1, 2]], dtype=np.int64)
    for bad_order in ([0, 0, 1], [0, 1, 3], [2, 1, 0]):  # repeated, out of range, unsorted
        with pytest.raises(ValueError):
            _graph.diagrams(values.data, np.array(bad_order, dtype=np.int64).data, edges.data, 1)
    with pytest.raises(ValueError):
        _graph.diagrams(values.data, order.data, np.array([[0, 5]], dtype=np.int64).data, 1)
    with pytest.raises(ValueError):
        _graph.diagrams(values.data, order[:2].data, edges.data, 1)
