"""The synthetic capillary-network generator, checked with networkx and graph theory."""

import json
import subprocess
import sys
from collections.abc import Callable
from pathlib import Path

import networkx as nx
import numpy as np
import pytest

from service.extension import limits_of
from service.settings import Settings
from workers.core.errors import ParameterError
from workers.core.network import edge_lengths, network_descriptors
from workers.scenario import CapillaryNetwork, capillary_network, capillary_request
from workers.scenario.capillaries import MIN_RADIUS, SPROUT_RADIUS
from workers.spec import JobRequest
from workers.spec.graphs import GraphArrays

SEEDS = (0, 1, 2, 3)


def graph(network: CapillaryNetwork) -> nx.Graph:
    """The network as a networkx graph, isolated nodes included."""
    g = nx.Graph()
    g.add_nodes_from(range(len(network.coordinates)))
    g.add_edges_from(network.edges.tolist())
    return g


def mean_over_seeds(
    measure: Callable[[nx.Graph], int], *, branch_probability: float, fusion_probability: float
) -> float:
    """``measure`` of the network, averaged over SEEDS."""
    values = [
        measure(
            graph(
                capillary_network(
                    branch_probability=branch_probability,
                    fusion_probability=fusion_probability,
                    seed=seed,
                )
            )
        )
        for seed in SEEDS
    ]
    return float(np.mean(values))


def cycle_count(g: nx.Graph) -> int:
    return len(nx.cycle_basis(g))


def branch_points(g: nx.Graph) -> int:
    return sum(1 for _, degree in g.degree() if degree >= 3)


def test_same_seed_same_network_and_different_seeds_differ() -> None:
    # Common practice: a seeded generator (numpy default_rng) replays exactly.
    a = capillary_network(branch_probability=0.05, fusion_probability=0.3, seed=7)
    b = capillary_network(branch_probability=0.05, fusion_probability=0.3, seed=7)
    c = capillary_network(branch_probability=0.05, fusion_probability=0.3, seed=8)
    assert np.array_equal(a.coordinates, b.coordinates)
    assert np.array_equal(a.edges, b.edges)
    assert np.array_equal(a.radius, b.radius)
    assert a.coordinates.shape != c.coordinates.shape or not np.array_equal(
        a.coordinates, c.coordinates
    )


@pytest.mark.parametrize(
    ("branch", "fusion", "seed", "size"),
    [
        (0.02, 0.05, 0, (1000.0, 1000.0)),
        (0.08, 0.6, 1, (1000.0, 1000.0)),
        (0.2, 1.0, 2, (400.0, 900.0)),
        (0.1, 0.5, 3, (1200.0, 300.0)),
    ],
)
def test_valid_graph_inside_the_region(
    branch: float, fusion: float, seed: int, size: tuple[float, float]
) -> None:
    step, fusion_radius = 10.0, 8.0
    network = capillary_network(
        branch_probability=branch, fusion_probability=fusion, seed=seed, size=size
    )
    n, m = len(network.coordinates), len(network.edges)
    assert network.coordinates.shape == (n, 2) and network.coordinates.dtype == np.float64
    assert network.edges.shape == (m, 2) and network.edges.dtype == np.int64
    assert network.radius.shape == (n,) and network.radius.dtype == np.float64
    assert m > 0
    assert network.edges.min() >= 0 and network.edges.max() < n
    assert np.all(network.edges[:, 0] != network.edges[:, 1])  # no self-loops
    # Reference library networkx: nx.Graph merges repeated edges (either orientation), so its
    # edge count equals m only if there are none.
    assert graph(network).number_of_edges() == m
    width, height = size
    x, y = network.coordinates.T
    assert np.all((x >= 0) & (x <= width) & (y >= 0) & (y <= height))
    # Radii of a few micrometres (common practice: capillaries are about 5-10 um across),
    # thinning in later branches but never below the floor.
    assert np.all((network.radius >= MIN_RADIUS) & (network.radius <= SPROUT_RADIUS))
    assert network.radius.min() < SPROUT_RADIUS  # there are later-generation branches
    # Geometry of the model: a growth edge is one step at most, a fusion edge at most the
    # fusion radius.
    lengths = np.linalg.norm(np.diff(network.coordinates[network.edges], axis=1)[:, 0], axis=1)
    assert lengths.max() <= max(step, fusion_radius) + 1e-9


@pytest.mark.parametrize("branch", [0.0, 0.03, 0.1])
def test_without_fusion_the_network_is_a_forest_of_one_tree_per_sprout(branch: float) -> None:
    for seed in SEEDS[:2]:
        g = graph(
            capillary_network(
                branch_probability=branch, fusion_probability=0.0, seed=seed, sprouts=6
            )
        )
        # Reference library networkx: is_forest, connected components.
        assert nx.is_forest(g)
        assert nx.number_connected_components(g) == 6


def test_loops_come_from_fusion_and_grow_with_its_probability() -> None:
    loops = [
        mean_over_seeds(cycle_count, branch_probability=0.05, fusion_probability=q)
        for q in (0.0, 0.1, 0.6)
    ]
    # Reference library networkx: cycle_basis; its length is the number of independent cycles.
    assert loops[0] == 0
    assert 0 < loops[1] < loops[2]


def test_cycle_basis_size_is_the_cycle_rank() -> None:
    # Theorem (cycle space of a graph, e.g. Diestel, Graph Theory, ch. 1, from memory): the
    # number of independent cycles is m - n + c, c the number of connected components.
    g = graph(capillary_network(branch_probability=0.08, fusion_probability=0.6, seed=5))
    rank = g.number_of_edges() - g.number_of_nodes() + nx.number_connected_components(g)
    assert rank > 0
    assert len(nx.cycle_basis(g)) == rank


def test_branch_points_grow_with_branch_probability() -> None:
    # Without fusion every node of degree >= 3 (networkx degree) is a branch point.
    points = [
        mean_over_seeds(branch_points, branch_probability=p, fusion_probability=0.0)
        for p in (0.0, 0.02, 0.06)
    ]
    assert points[0] == 0  # unbranched sprouts are paths
    assert 0 < points[1] < points[2]
    # With fusion too (fusions add degree-3 nodes of their own, at every setting).
    with_fusion = [
        mean_over_seeds(branch_points, branch_probability=p, fusion_probability=0.3)
        for p in (0.01, 0.04, 0.1)
    ]
    assert with_fusion[0] < with_fusion[1] < with_fusion[2]


def test_sprouts_advance_toward_the_target() -> None:
    height = 1000.0
    for seed in SEEDS:
        network = capillary_network(
            branch_probability=0.05, fusion_probability=0.3, seed=seed, bias=0.6
        )
        assert network.coordinates[:, 1].max() >= 0.8 * height
        assert np.all(network.coordinates[:8, 1] == 0.0)  # the sprouts start on y = 0
    # The tips (degree-1 nodes off the source edge, networkx degree) of a network stopped
    # after more steps lie further on.
    tip_heights = []
    for max_steps in (10, 30, 60):
        network = capillary_network(
            branch_probability=0.05, fusion_probability=0.0, seed=3, max_steps=max_steps
        )
        g = graph(network)
        tips = [node for node, degree in g.degree() if degree == 1 and node >= 8]
        tip_heights.append(float(network.coordinates[tips, 1].mean()))
    assert tip_heights[0] < tip_heights[1] < tip_heights[2]


@pytest.mark.parametrize(
    ("parameters", "field"),
    [
        ({"branch_probability": 1.5}, "/branch_probability"),
        ({"fusion_probability": -0.1}, "/fusion_probability"),
        ({"bias": 2.0}, "/bias"),
        ({"sprouts": 0}, "/sprouts"),
        ({"size": (1000.0, 0.0)}, "/size"),
        ({"step": 0.0}, "/step"),
        ({"max_steps": -1}, "/max_steps"),
        ({"fusion_radius": float("nan")}, "/fusion_radius"),
    ],
)
def test_parameters_out_of_range_are_refused(parameters: dict[str, object], field: str) -> None:
    arguments: dict[str, object] = {"branch_probability": 0.05, "fusion_probability": 0.3}
    arguments.update(parameters)
    with pytest.raises(ParameterError) as caught:
        capillary_network(seed=0, **arguments)  # type: ignore[arg-type]
    assert caught.value.field == field


def check_request(request: dict[str, object]) -> None:
    """The job request shape of the demo: a graph input in micrometres, height filtration
    and descriptors toward +y, diagrams and descriptors out."""
    assert set(request) == {"input", "filtration", "output", "descriptors"}
    graph_input = request["input"]
    assert isinstance(graph_input, dict)
    assert set(graph_input) == {"type", "nodes", "edges", "radius", "units"}
    assert graph_input["type"] == "graph" and graph_input["units"] == "um"
    nodes, edges, radius = graph_input["nodes"], graph_input["edges"], graph_input["radius"]
    assert nodes and all(len(node) == 2 for node in nodes)
    assert all(round(v, 3) == v for node in nodes for v in node)
    assert len(radius) == len(nodes) and all(round(r, 3) == r for r in radius)
    assert edges and all(
        len(e) == 2 and all(isinstance(i, int) and 0 <= i < len(nodes) for i in e) for e in edges
    )
    assert request["filtration"] == {"type": "height", "direction": [0, 1]}
    assert request["output"] == ["diagrams", "descriptors"]
    assert request["descriptors"] == {"direction": [0, 1]}


def test_request_is_json_ready_and_rounded() -> None:
    network = capillary_network(branch_probability=0.05, fusion_probability=0.3, seed=2)
    request = capillary_request(network)
    check_request(json.loads(json.dumps(request)))  # survives a JSON round trip
    nodes = np.array(request["input"]["nodes"])  # type: ignore[index]
    assert np.max(np.abs(nodes - network.coordinates)) <= 5e-4
    assert request["input"]["edges"] == network.edges.tolist()  # type: ignore[index]


def run_cli(*arguments: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "workers.scenario", *arguments],
        capture_output=True,
        text=True,
        cwd=Path(__file__).resolve().parents[2],
    )


def test_command_writes_requests_and_readme(tmp_path: Path) -> None:
    completed = run_cli("network", "--out", str(tmp_path), "--count", "4", "--seed", "11")
    assert completed.returncode == 0, completed.stderr
    files = sorted(tmp_path.glob("network-*.json"))
    assert len(files) == 4
    assert len({f.read_text() for f in files}) == 4  # four different networks
    for path in files:
        check_request(json.loads(path.read_text()))
    readme = (tmp_path / "README.txt").read_text()
    assert "synthetic" in readme.lower() and "not for diagnosis" in readme
    assert all(path.name in readme for path in files)


@pytest.mark.parametrize(
    "arguments",
    [
        (),
        ("network",),
        ("network", "--out", "OUT", "--count", "0"),
        ("network", "--out", "OUT", "--count", "many"),
        ("network", "--out", "OUT", "--seed", "1.5"),
        ("trees", "--out", "OUT"),
    ],
)
def test_command_usage_errors_exit_2(arguments: tuple[str, ...], tmp_path: Path) -> None:
    # Common practice (argparse, POSIX utilities): exit status 2 for a usage error.
    out = str(tmp_path / "out")
    completed = run_cli(*[out if a == "OUT" else a for a in arguments])
    assert completed.returncode == 2
    assert "usage" in completed.stderr
    assert not (tmp_path / "out").exists()


def descriptor_vector(
    branch_probability: float, fusion_probability: float, seed: int
) -> np.ndarray:
    """Network descriptors of one generated network that are counts or lengths."""
    network = capillary_network(
        branch_probability=branch_probability, fusion_probability=fusion_probability, seed=seed
    )
    lengths = edge_lengths(network.coordinates, network.edges)
    found = network_descriptors(network.coordinates, network.edges, lengths).as_dict()
    keys = ("branch_point_count", "cycle_count", "tip_count", "segment_count")
    return np.array([found[key] for key in keys], dtype=float)


def test_different_branching_and_fusion_give_clearly_different_descriptors() -> None:
    # The two demo settings must be told apart by their descriptors alone: the gap between
    # the groups' means is many times the spread within each group (a separation of
    # standardised means, common practice for "clearly different").
    sparse = np.array([descriptor_vector(0.02, 0.05, seed) for seed in SEEDS])
    dense = np.array([descriptor_vector(0.08, 0.6, seed) for seed in SEEDS])
    spread = np.maximum(sparse.std(axis=0), dense.std(axis=0)) + 1.0
    gap = np.abs(dense.mean(axis=0) - sparse.mean(axis=0))
    cycles, branch_points_found = gap[1] / spread[1], gap[0] / spread[0]
    assert cycles > 3 and branch_points_found > 3, (gap, spread)
    # Every dense network has more loops than every sparse one (no overlap at all).
    assert dense[:, 1].min() > sparse[:, 1].max()


def test_generated_requests_are_valid_job_requests(tmp_path: Path) -> None:
    assert run_cli("network", "--out", str(tmp_path), "--count", "3").returncode == 0
    for path in sorted(tmp_path.glob("*.json")):
        request = JobRequest.model_validate_json(path.read_text())
        data = request.input_data()
        assert isinstance(data, GraphArrays)
        assert request.field_errors(limits_of(Settings()), data) == []
