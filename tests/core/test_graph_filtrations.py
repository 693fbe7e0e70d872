"""Node values of graph filtrations against their definitions and networkx."""

import networkx as nx
import numpy as np
import pytest
from scipy.spatial.distance import cdist

from workers.core.errors import InvalidArrayError, ParameterError
from workers.core.graph_filtrations import (
    geodesic_distances,
    node_heights,
    node_radial_distances,
)


def _random_graph(seed: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    points = rng.uniform(size=(80, 3))
    u, v = np.nonzero(np.triu(cdist(points, points) < 0.25, 1))
    edges = np.column_stack([u, v])
    lengths = rng.uniform(0, 2, len(edges))
    lengths[::7] = 0.0  # zero-length edges are edges too
    return points, edges, lengths


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_geodesic_distances_equal_networkx_multi_source_dijkstra(seed: int) -> None:
    points, edges, lengths = _random_graph(seed)
    seeds = np.array([0, 5, 5, 17])
    found = geodesic_distances(len(points), edges, lengths, seeds)
    graph = nx.Graph()
    graph.add_nodes_from(range(len(points)))
    graph.add_weighted_edges_from(
        (int(a), int(b), float(w)) for (a, b), w in zip(edges, lengths, strict=True)
    )
    # networkx.multi_source_dijkstra_path_length (reference library); unreached nodes absent.
    reached = nx.multi_source_dijkstra_path_length(graph, {0, 5, 17})
    expected = np.array([reached.get(node, np.inf) for node in range(len(points))])
    np.testing.assert_allclose(found, expected, rtol=1e-12, atol=0)
    assert np.isinf(found).any() == (len(reached) < len(points))


def test_unreached_nodes_are_infinite() -> None:
    edges = np.array([[0, 1], [2, 3]])
    found = geodesic_distances(5, edges, np.array([1.5, 1.0]), np.array([0]))
    assert found.tolist() == [0.0, 1.5, np.inf, np.inf, np.inf]  # worked example


def test_heights_and_radial_distances_are_their_definitions() -> None:
    points = np.random.default_rng(3).normal(size=(50, 3))
    direction = np.array([1.0, 2.0, 2.0]) / 3.0
    np.testing.assert_allclose(node_heights(points, direction), points @ direction, rtol=1e-15)
    center = np.array([0.5, -1.0, 2.0])
    # scipy.spatial.distance.cdist (reference library)
    np.testing.assert_allclose(
        node_radial_distances(points, center), cdist(points, center[None])[:, 0], rtol=1e-14
    )


def test_radial_distances_do_not_overflow() -> None:
    # hypot keeps 1e200 finite where its square would overflow (common practice).
    found = node_radial_distances(np.array([[3e200, 4e200]]), np.zeros(2))
    assert found[0] == pytest.approx(5e200, rel=1e-15)


def test_bad_seeds_and_lengths_raise() -> None:
    edges = np.array([[0, 1]])
    with pytest.raises(ParameterError):
        geodesic_distances(2, edges, np.array([1.0]), np.array([2]))
    with pytest.raises(ParameterError):
        geodesic_distances(2, edges, np.array([1.0]), np.array([], dtype=np.int64))
    with pytest.raises(InvalidArrayError):
        geodesic_distances(2, edges, np.array([-1.0]), np.array([0]))
