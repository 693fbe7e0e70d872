"""The synthetic demo generators (capillary networks, cell layouts, vessel masks and images)
and the ``python -m workers.scenario`` command, checked with networkx, graph theory, geometry,
ripser, scipy and the readers of each file format."""

import csv
import json
import math
import re
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path

import networkx as nx
import numpy as np
import pytest
import tifffile
from PIL import Image
from ripser import ripser
from scipy import ndimage
from scipy.spatial import cKDTree

from service.extension import limits_of
from service.graphml import decode_graph
from service.settings import Settings
from service.uploads import decode_array
from workers.core.cell_mixing import mixing_descriptors
from workers.core.errors import ParameterError
from workers.core.network import edge_lengths, network_descriptors
from workers.core.skeleton_graph import skeleton_graph
from workers.scenario import cells as cell_module
from workers.scenario.capillaries import (
    MIN_RADIUS,
    SPROUT_RADIUS,
    CapillaryNetwork,
    capillary_network,
    capillary_request,
)
from workers.scenario.cells import CLASS_NAMES, cell_layout, two_population_layout
from workers.scenario.vessel_masks import network_mask, tube_volume, vessel_image
from workers.spec import JobRequest
from workers.spec.kinds import GraphArrays, kind_of, request_errors

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
        ("--count", "3"),  # no --out, for the default kind all
        ("all", "--out", "OUT", "--count", "-1"),
        ("cells", "--out", "OUT", "--count", "0"),
        ("masks", "images", "--out", "OUT"),  # one kind at most
        ("images", "--out", "OUT", "--spacing", "2"),
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
        data = kind_of(request.input.type).data(request.input)
        assert isinstance(data, GraphArrays)
        assert request_errors(request, limits_of(Settings()), data) == []


# Cell layouts ---------------------------------------------------------------------------

PATTERNS = ("mixed", "segregated", "surrounding")
CELL_SEEDS = range(10)


@pytest.mark.parametrize("pattern", PATTERNS)
@pytest.mark.parametrize(("size", "count"), [((500.0, 500.0), 300), ((800.0, 300.0), 101)])
def test_cell_layout_shapes_populations_and_region(
    pattern: str, size: tuple[float, float], count: int
) -> None:
    points, populations = cell_layout(pattern, 3, size=size, count=count)
    assert points.shape == (count, 2) and points.dtype == np.float64
    assert np.all(np.isfinite(points))
    assert populations.shape == (count,)
    assert populations.tolist() == ["A"] * (count // 2) + ["B"] * (count - count // 2)
    x, y = points.T
    assert np.all((x >= 0) & (x <= size[0]) & (y >= 0) & (y <= size[1]))


@pytest.mark.parametrize("pattern", PATTERNS)
def test_cell_layout_same_seed_same_layout_and_different_seeds_differ(pattern: str) -> None:
    # Common practice: a seeded generator (numpy default_rng) replays exactly.
    a, b, c = (cell_layout(pattern, seed) for seed in (5, 5, 6))
    assert np.array_equal(a[0], b[0]) and np.array_equal(a[1], b[1])
    assert not np.array_equal(a[0], c[0])


@pytest.mark.parametrize(
    ("arguments", "field"),
    [
        ({"pattern": "rings"}, "/pattern"),
        ({"count": 1}, "/count"),
        ({"count": 2.5}, "/count"),
        ({"count": True}, "/count"),
        ({"size": (500.0, -1.0)}, "/size"),
        ({"size": (float("nan"), 500.0)}, "/size"),
        ({"size": (500.0,)}, "/size"),
    ],
)
def test_cell_layout_refuses_parameters_out_of_range(
    arguments: dict[str, object], field: str
) -> None:
    given: dict[str, object] = {"pattern": "mixed", "seed": 0}
    given.update(arguments)
    with pytest.raises(ParameterError) as caught:
        cell_layout(**given)  # type: ignore[arg-type]
    assert caught.value.field == field


def cross_ratio(points: np.ndarray, populations: np.ndarray) -> float:
    """Mean distance from a B cell to the nearest A cell over the mean distance from a B cell
    to the nearest other B cell (nearest neighbours by scipy.spatial.cKDTree)."""
    a, b = points[populations == "A"], points[populations == "B"]
    to_a, _ = cKDTree(a).query(b)
    to_b, _ = cKDTree(b).query(b, k=2)  # the first neighbour is the cell itself
    return float(to_a.mean() / to_b[:, 1].mean())


def test_cell_patterns_are_told_apart_by_nearest_neighbour_distances() -> None:
    ratios = {p: [cross_ratio(*cell_layout(p, seed)) for seed in CELL_SEEDS] for p in PATTERNS}
    # Two independent uniform populations of equal size: a B cell's nearest A cell is as far,
    # on average, as its nearest other B cell (both about 1 / (2 sqrt(density)), Clark & Evans
    # 1954, Ecology 35:445, from memory), so the ratio is near 1.
    assert max(ratios["mixed"]) < 1.5
    # A ring of B cells just outside each nest of A: a B cell's nearest A is a few ring
    # spacings away, its nearest B one spacing.
    assert 2.2 < min(ratios["surrounding"]) and max(ratios["surrounding"]) < 8.0
    # Clusters apart: the nearest A cell is in another cluster, a tile away.
    assert min(ratios["segregated"]) > 12.0
    # Clark & Evans again, for the absolute scale of the mixed layout: mean distance from a B
    # cell to the nearest of 150 uniform A cells in 500 x 500 um is 0.5 / sqrt(150 / 500^2)
    # = 20.4 um, a little more with the region's edges (no A cells beyond them).
    expected = 0.5 / math.sqrt(150 / 500.0**2)
    for seed in CELL_SEEDS:
        points, populations = cell_layout("mixed", seed)
        to_a, _ = cKDTree(points[populations == "A"]).query(points[populations == "B"])
        assert expected * 0.85 < to_a.mean() < expected * 1.25


def long_h0_bars(points: np.ndarray, length: float) -> int:
    """Finite bars of the H0 Rips diagram (reference library ripser) that die after
    ``length``."""
    h0 = ripser(points, maxdim=0)["dgms"][0]
    return int(np.sum(np.isfinite(h0[:, 1]) & (h0[:, 1] > length)))


def test_cell_patterns_are_told_apart_by_their_h0_diagrams() -> None:
    # Theorem (H0 of a Rips filtration is single linkage: its finite deaths are the edge
    # lengths of a Euclidean minimum spanning tree; e.g. Edelsbrunner & Harer, Computational
    # Topology, from memory): k groups whose gaps all exceed ``length``, each connected by
    # steps below it, give exactly k - 1 bars longer than ``length``.
    length = 55.0
    tile = 500.0 / cell_module.SEGREGATED_GRID
    assert cell_module.CLUSTER_GAP * tile > length  # gap between segregated clusters: 58 um
    tile = 500.0 / cell_module.SURROUNDING_GRID
    outer = (cell_module.NEST_RADIUS + cell_module.RING_GAP + cell_module.RING_WIDTH) * tile
    assert (1 - 2 * cell_module.JITTER) * tile - 2 * outer > length  # between rings: 75 um
    for seed in CELL_SEEDS:
        segregated = long_h0_bars(cell_layout("segregated", seed)[0], length)
        surrounding = long_h0_bars(cell_layout("surrounding", seed)[0], length)
        mixed = long_h0_bars(cell_layout("mixed", seed)[0], length)
        assert segregated == cell_module.SEGREGATED_GRID**2 - 1  # 9 clusters
        assert surrounding == cell_module.SURROUNDING_GRID**2 - 1  # 4 nests with their rings
        assert mixed <= 2  # one spread-out group, at most a few cells astray


# Two-population layouts at tissue spacing --------------------------------------------------

LAYOUTS = ("mixed", "excluded", "ringed")
SPACING = math.sqrt(cell_module.CELL_AREA)  # about 14 um between neighbouring cells


@pytest.mark.parametrize("kind", LAYOUTS)
def test_layout_counts_hard_core_region_and_spacing(kind: str) -> None:
    points, labels = two_population_layout(kind, 1600, 400, 0.05, 3)
    assert points.shape == (2000, 2) and points.dtype == np.float64
    assert labels.dtype == np.int64 and labels.tolist() == [0] * 1600 + [1] * 400
    assert CLASS_NAMES == ("tumour", "immune")
    tree = cKDTree(points)
    nearest, _ = tree.query(points, k=2)  # the first neighbour is the cell itself
    assert nearest[:, 1].min() >= cell_module.MIN_DISTANCE  # the hard core holds
    # Tissue spacing (the brief: about 10 to 15 um between neighbouring cells).
    assert 9.5 < np.median(nearest[:, 1]) < 13.0
    # The default region: the square giving each cell CELL_AREA (around the disc for ringed).
    side = math.sqrt(2000 * cell_module.CELL_AREA)
    if kind == "ringed":
        side = 2 * math.sqrt(2000 * cell_module.CELL_AREA / math.pi)
        radius = np.hypot(*(points - side / 2).T)
        assert radius.max() <= side / 2
    assert points.min() >= 0 and points.max() <= side


@pytest.mark.parametrize("kind", LAYOUTS)
def test_layout_same_seed_same_layout_and_different_seeds_differ(kind: str) -> None:
    # Common practice: a seeded generator (numpy default_rng) replays exactly.
    a, b, c = (two_population_layout(kind, 300, 100, 0.1, seed) for seed in (5, 5, 6))
    assert np.array_equal(a[0], b[0]) and np.array_equal(a[1], b[1])
    assert not np.array_equal(a[0], c[0])


def test_layout_in_a_given_region_and_one_cell_of_a_class() -> None:
    points, labels = two_population_layout("excluded", 1, 1, 0.0, 0, region=(300.0, 100.0))
    assert labels.tolist() == [0, 1]
    # A sharp boundary (mixing 0): the immune cell is the one nearer the edge x = width.
    assert points[1, 0] > points[0, 0]
    points, _ = two_population_layout("mixed", 50, 20, 1.0, 0, region=(300.0, 100.0))
    assert np.all((points >= 0) & (points <= (300.0, 100.0)))


@pytest.mark.parametrize(
    ("arguments", "field"),
    [
        ({"kind": "striped"}, "/kind"),
        ({"n_first": 0}, "/n_first"),
        ({"n_second": 1.5}, "/n_second"),
        ({"n_second": True}, "/n_second"),
        ({"mixing": -0.1}, "/mixing"),
        ({"mixing": 1.5}, "/mixing"),
        ({"mixing": float("nan")}, "/mixing"),
        ({"region": (100.0, 0.0)}, "/region"),
        ({"region": (100.0,)}, "/region"),
        ({"region": (100.0, float("inf"))}, "/region"),
        # 200 cells of hard-core discs 9 um wide cover 0.51 of 100 x 250 um: more than allowed.
        ({"region": (100.0, 250.0)}, "/region"),
    ],
)
def test_layout_refuses_parameters_out_of_range(arguments: dict[str, object], field: str) -> None:
    given: dict[str, object] = {
        "kind": "mixed",
        "n_first": 150,
        "n_second": 50,
        "mixing": 0.1,
        "seed": 0,
    }
    given.update(arguments)
    with pytest.raises(ParameterError) as caught:
        two_population_layout(**given)  # type: ignore[arg-type]
    assert caught.value.field == field


def test_layout_that_cannot_be_packed_in_its_rounds_is_refused(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    # The guard behind MAX_PACKING: with one round of candidates, 2000 cells do not fit.
    monkeypatch.setattr(cell_module, "_MAX_ROUNDS", 1)
    with pytest.raises(ParameterError) as caught:
        two_population_layout("mixed", 1600, 400, 0.1, 0)
    assert caught.value.field == "/region"


def immune_near_tumour(kind: str, seed: int, mixing: float = 0.05) -> float:
    """The fraction of immune cells with a tumour cell within two cell spacings (28 um), by
    workers.core.cell_mixing (itself checked against scipy's cdist in tests/core)."""
    points, labels = two_population_layout(kind, 2000, 500, mixing, seed)
    found = mixing_descriptors(points, labels, CLASS_NAMES, [2 * SPACING])
    return found.pairs[("immune", "tumour")].fraction_within[0]


def test_layouts_differ_the_way_they_are_named() -> None:
    for seed in range(3):
        near = {kind: immune_near_tumour(kind, seed) for kind in LAYOUTS}
        # Geometry (from the layouts' definitions): interspersed immune cells all have tumour
        # neighbours. The ring holds the outer 0.2 of the disc's area, 1 - sqrt(0.8) = 0.106
        # of its radius of 399 um: 42 um, 3 spacings, so about 2/3 of it lies within 2
        # spacings of the core. The band along one edge is 0.2 of 707 um, 10 spacings, so
        # about 2/10 of it does (measured 0.57-0.61 and 0.19-0.21 over these seeds).
        assert near["mixed"] > 0.95
        assert 0.45 < near["ringed"] < 0.75
        assert 0.1 < near["excluded"] < 0.3
        assert near["mixed"] > near["ringed"] > near["excluded"]
        # Ringed: immune cells further from the centre than tumour cells (median radius). In a
        # uniform disc of radius R the fraction within r is (r/R)^2 (area law); tumour cells
        # fill the inner 0.8 of the area (median radius sqrt(0.4) R), immune cells the outer
        # 0.2 (median sqrt(0.9) R): a ratio of sqrt(0.9 / 0.4) = 1.5; labels at random give 1.
        for kind, low, high in (("ringed", 1.4, 1.6), ("mixed", 0.9, 1.1)):
            points, labels = two_population_layout(kind, 2000, 500, 0.05, seed)
            radius = np.hypot(*(points - points.mean(axis=0)).T)
            ratio = np.median(radius[labels == 1]) / np.median(radius[labels == 0])
            assert low < ratio < high, (kind, ratio)
        # Excluded: the immune cells beyond the tumour cells along x.
        points, labels = two_population_layout("excluded", 2000, 500, 0.05, seed)
        assert np.quantile(points[labels == 1, 0], 0.1) > np.quantile(points[labels == 0, 0], 0.9)


def test_mixing_mixes() -> None:
    # mixing 1 gives labels at random whatever the layout: then excluded is as mixed as mixed.
    assert immune_near_tumour("excluded", 0, mixing=1.0) > 0.95
    assert immune_near_tumour("excluded", 0, mixing=0.3) > immune_near_tumour("excluded", 0)


def test_layout_of_20000_and_5000_cells_is_quick() -> None:
    for kind in LAYOUTS:
        started = time.perf_counter()
        points, labels = two_population_layout(kind, 20_000, 5_000, 0.05, 1)
        elapsed = time.perf_counter() - started
        print(f"two_population_layout {kind} 20000 + 5000: {elapsed:.2f} s")
        assert elapsed < 5.0
        assert np.bincount(labels).tolist() == [20_000, 5_000]
        assert cKDTree(points).query(points, k=2)[0][:, 1].min() >= cell_module.MIN_DISTANCE


# Vessel masks and images ----------------------------------------------------------------


def drawn_network(
    segments: list[tuple[tuple[float, float], tuple[float, float]]],
) -> CapillaryNetwork:
    """A network of straight segments (micrometres) cut into edges of at most 10 um, segments
    sharing an end point sharing the node; radius 3 um at x = 0 up to 5 um at x = 1000."""
    index: dict[tuple[float, float], int] = {}
    coordinates: list[tuple[float, float]] = []
    edges: list[tuple[int, int]] = []

    def node(x: float, y: float) -> int:
        key = (round(x, 6), round(y, 6))
        if key not in index:
            index[key] = len(coordinates)
            coordinates.append(key)
        return index[key]

    for (x0, y0), (x1, y1) in segments:
        pieces = max(1, math.ceil(math.dist((x0, y0), (x1, y1)) / 10.0))
        chain = [
            node(x0 + (x1 - x0) * k / pieces, y0 + (y1 - y0) * k / pieces)
            for k in range(pieces + 1)
        ]
        edges += list(zip(chain[:-1], chain[1:], strict=True))
    points = np.array(coordinates, dtype=np.float64)
    return CapillaryNetwork(
        coordinates=points,
        edges=np.array(edges, dtype=np.int64),
        radius=3.0 + 2.0 * points[:, 0] / 1000.0,
    )


def cycle_rank_and_components(nodes: int, edges: np.ndarray) -> tuple[int, int]:
    """(E - V + C, C) of a graph, with networkx's connected components."""
    g = nx.Graph()
    g.add_nodes_from(range(nodes))
    g.add_edges_from(edges.tolist())
    components = nx.number_connected_components(g)
    return g.number_of_edges() - g.number_of_nodes() + components, components


EIGHT = np.ones((3, 3), dtype=bool)
"""8-connectivity for scipy.ndimage.label, the adjacency of the skeleton graph."""


def test_mask_of_well_separated_vessels_keeps_loops_and_components() -> None:
    # A ladder of three loops, a square loop and a tree with a diagonal branch, far apart:
    # 4 independent cycles in 3 components.
    network = drawn_network(
        [
            *[((x, y), (x, y + 200.0)) for x in (100.0, 300.0) for y in (100.0, 300.0, 500.0)],
            *[((100.0, y), (300.0, y)) for y in (100.0, 300.0, 500.0, 700.0)],
            ((600.0, 600.0), (900.0, 600.0)),
            ((900.0, 600.0), (900.0, 900.0)),
            ((900.0, 900.0), (600.0, 900.0)),
            ((600.0, 900.0), (600.0, 600.0)),
            ((700.0, 100.0), (700.0, 250.0)),
            ((700.0, 250.0), (700.0, 400.0)),
            ((700.0, 250.0), (850.0, 350.0)),
        ]
    )
    assert cycle_rank_and_components(len(network.coordinates), network.edges) == (4, 3)
    mask = network_mask(network, spacing=2.0)
    skeleton = skeleton_graph(mask, (2.0, 2.0))
    # Theorem (cycle rank E - V + C, Diestel, Graph Theory, ch. 1, from memory), counted with
    # networkx on lacuna's skeleton graph of the mask: the same loops and components as the
    # source network.
    assert cycle_rank_and_components(len(skeleton.coordinates), skeleton.edges) == (4, 3)
    assert ndimage.label(mask, structure=EIGHT)[1] == 3  # reference: scipy.ndimage.label
    # The skeleton runs along the drawn centrelines: skeleton coordinates are (row, column)
    # = (y, x) in um; each lies within half an edge (5 um) plus a pixel and an end cap of
    # radius at most 5 um of a source node.
    distance, _ = cKDTree(network.coordinates).query(skeleton.coordinates[:, ::-1])
    assert distance.max() <= 5.0 + 2.0 + 5.0


def test_mask_geometry_follows_the_pixel_convention_and_the_radii() -> None:
    # A disc of radius 10 um at one pixel centre, spacing 1 um: the pixels with centres within
    # the radius, about pi r^2 (Gauss circle problem; the count is 317, from memory).
    lonely = CapillaryNetwork(
        coordinates=np.array([[500.0, 300.0]]),
        edges=np.empty((0, 2), dtype=np.int64),
        radius=np.array([10.0]),
    )
    disc = network_mask(lonely, spacing=1.0)
    assert disc.shape == (1001, 1001)
    assert int(disc.sum()) == 317
    assert disc[300, 500] and not disc[500, 300]  # rows along y, columns along x
    # One straight tube of radius 5 and length 200 (a capsule, geometry: area
    # 2 r L + pi r^2), at 0.5 um pixels: pixel count times pixel area within 2%.
    tube = CapillaryNetwork(
        coordinates=np.array([[100.0, 100.0], [260.0, 220.0]]),
        edges=np.array([[0, 1]], dtype=np.int64),
        radius=np.array([5.0, 5.0]),
    )
    area = float(network_mask(tube, spacing=0.5).sum()) * 0.25
    assert area == pytest.approx(2 * 5.0 * 200.0 + math.pi * 25.0, rel=0.02)
    # A tapered tube (radius 2 to 6 um) is thin at one end and thick at the other.
    tapered = CapillaryNetwork(tube.coordinates, tube.edges, np.array([2.0, 6.0]))
    mask = network_mask(tapered, spacing=0.5)
    near, far = (int(mask[:, column].sum()) for column in (2 * 120, 2 * 240))
    assert far > 2 * near


def test_demo_direction_is_node_order_on_the_graph_and_array_axis_order_on_its_mask() -> None:
    # What the README's networks section says: the demo graph's nodes are (x, y), so the
    # growth direction is [0, 1]; its mask has rows along y, so on the mask's skeleton
    # (array-axis order, (row, column)) the same direction is [1, 0]. Geometry: both reach
    # the same depth from the source edge, within a vessel radius and a pixel.
    network = capillary_network(branch_probability=0.05, fusion_probability=0.3, seed=1)
    request = capillary_request(network)
    assert request["filtration"] == {"type": "height", "direction": [0, 1]}
    nodes = np.asarray(request["input"]["nodes"])  # type: ignore[index]
    spacing = 2.0
    skeleton = skeleton_graph(network_mask(network, spacing=spacing), [spacing, spacing])
    graph_depth, mask_depth = nodes @ [0.0, 1.0], skeleton.coordinates @ [1.0, 0.0]
    slack = SPROUT_RADIUS + math.hypot(spacing, spacing)
    assert abs(mask_depth.max() - graph_depth.max()) <= slack
    assert abs(mask_depth.min() - graph_depth.min()) <= slack
    # Every skeleton node, read (row, column) = (y, x), lies on a vessel of the graph: within
    # half a step of a node plus a radius and a pixel; read the other way round, most do not.
    reach = 10.0 / 2 + slack
    tree = cKDTree(nodes)
    assert tree.query(skeleton.coordinates[:, ::-1])[0].max() <= reach
    assert np.mean(tree.query(skeleton.coordinates)[0] <= reach) < 0.5


README = Path(__file__).resolve().parents[2] / "README.md"


def test_readme_commands_give_the_demo_direction_of_each_input() -> None:
    # The rule tested above, applied to every README command (continuation lines joined):
    # the direction is [0, 1] on the demo graphs (nodes (x, y)), [1, 0] on the demo masks
    # and their skeletons (array-axis order (row, column) = (y, x)).
    commands = README.read_text(encoding="utf-8").replace("\\\n", " ").splitlines()
    checked = 0
    for command in commands:
        directions = re.findall(r'"direction": (\[[^\]]*\])', command)
        for demo, expected in (("demo/masks/", "[1, 0]"), ("demo/network/", "[0, 1]")):
            if demo in command and directions:
                assert set(directions) == {expected}, command
                checked += 1
    assert checked >= 1  # the skeleton command of the README is among them


@pytest.mark.parametrize(("branch", "fusion"), [(0.02, 0.05), (0.08, 0.6)])
def test_every_network_component_is_drawn_in_one_piece(branch: float, fusion: float) -> None:
    # Reference libraries networkx (components of the source) and scipy.ndimage.label
    # (components of the mask): a component of the network is one piece of the mask, and the
    # mask has no more pieces than the network has components (touching vessels may merge).
    for seed in SEEDS[:2]:
        network = capillary_network(branch_probability=branch, fusion_probability=fusion, seed=seed)
        labels, pieces = ndimage.label(network_mask(network, spacing=2.0), structure=EIGHT)
        pixel = np.rint(network.coordinates[:, ::-1] / 2.0).astype(np.int64)
        at_nodes = labels[pixel[:, 0], pixel[:, 1]]
        assert np.all(at_nodes > 0)
        components = list(nx.connected_components(graph(network)))
        assert all(len(set(at_nodes[sorted(c)].tolist())) == 1 for c in components)
        assert pieces <= len(components)


def test_mask_of_unbranched_sprouts_far_apart_has_their_topology() -> None:
    # Sparse enough to draw faithfully: 4 unbranched sprouts 250 um apart (the model makes
    # paths, networkx says 4 trees), which never come near each other.
    for seed in SEEDS:
        network = capillary_network(
            branch_probability=0.0, fusion_probability=0.0, seed=seed, sprouts=4
        )
        assert cycle_rank_and_components(len(network.coordinates), network.edges) == (0, 4)
        mask = network_mask(network, spacing=2.0)
        skeleton = skeleton_graph(mask, (2.0, 2.0))
        assert cycle_rank_and_components(len(skeleton.coordinates), skeleton.edges) == (0, 4)
        assert ndimage.label(mask, structure=EIGHT)[1] == 4


@pytest.mark.parametrize(
    ("arguments", "field"),
    [
        ({"spacing": 0.0}, "/spacing"),
        ({"spacing": math.inf}, "/spacing"),
        ({"size": (1.0, -1.0)}, "/size"),
    ],
)
def test_network_mask_refuses_parameters_out_of_range(
    arguments: dict[str, object], field: str
) -> None:
    network = capillary_network(branch_probability=0.0, fusion_probability=0.0, seed=0)
    with pytest.raises(ParameterError) as caught:
        network_mask(network, **arguments)  # type: ignore[arg-type]
    assert caught.value.field == field


def test_tube_volume_is_seeded_and_its_tubes_run_face_to_face() -> None:
    volume = tube_volume(3)
    assert volume.shape == (48, 64, 64) and volume.dtype == np.bool_
    assert np.array_equal(volume, tube_volume(3)) and not np.array_equal(volume, tube_volume(4))
    assert 0 < volume.mean() < 0.2
    six = np.ones((3, 3, 3), dtype=bool)
    for seed in range(6):
        # At most one piece per tube (tubes that cross merge; reference scipy.ndimage.label).
        assert 1 <= ndimage.label(tube_volume(seed, tubes=4), structure=six)[1] <= 4
        # One tube: one piece, a skeleton without loops (networkx on lacuna's skeleton graph),
        # touching two opposite faces.
        one = tube_volume(seed, tubes=1)
        assert ndimage.label(one, structure=six)[1] == 1
        skeleton = skeleton_graph(one, (1.0, 1.0, 1.0))
        assert cycle_rank_and_components(len(skeleton.coordinates), skeleton.edges) == (0, 1)
        assert any(one.take(0, axis).any() and one.take(-1, axis).any() for axis in range(3))


@pytest.mark.parametrize(
    ("arguments", "field"),
    [
        ({"shape": (48, 64)}, "/shape"),
        ({"shape": (4, 64, 64)}, "/shape"),
        ({"tubes": 0}, "/tubes"),
        ({"radius": (3.0, 2.0)}, "/radius"),
        ({"radius": (0.0, 2.0)}, "/radius"),
        ({"radius": (2.0, 40.0)}, "/radius"),
    ],
)
def test_tube_volume_refuses_parameters_out_of_range(
    arguments: dict[str, object], field: str
) -> None:
    with pytest.raises(ParameterError) as caught:
        tube_volume(0, **arguments)  # type: ignore[arg-type]
    assert caught.value.field == field


def test_vessel_image_is_the_blurred_mask_plus_seeded_noise() -> None:
    network = capillary_network(branch_probability=0.05, fusion_probability=0.3, seed=1)
    mask = network_mask(network, spacing=2.0)
    for source in (mask, tube_volume(2)):
        clean = vessel_image(source, 0, noise=0.0)
        assert clean.dtype == np.float32 and clean.shape == source.shape
        # Theorem: a normalised symmetric kernel with half-sample reflection at the borders
        # (scipy's "reflect") keeps the sum, so the excess over the background is (1.0 - 0.1)
        # times the vessel pixels, though the vessels touch the border.
        excess = float(np.sum(clean.astype(np.float64) - 0.1))
        assert excess == pytest.approx(0.9 * int(source.sum()), rel=1e-4)
        noisy = vessel_image(source, 7, noise=0.05)
        assert np.array_equal(noisy, vessel_image(source, 7, noise=0.05))
        assert not np.array_equal(noisy, vessel_image(source, 8, noise=0.05))
        # Far from the vessels (over 6 blur widths) only the noise is left: mean 0.1 and the
        # standard deviation asked for (sample statistics of over 10^4 pixels, within 5%).
        far = ndimage.distance_transform_edt(source == 0) > 9.0
        assert far.sum() > 10_000
        assert float(noisy[far].mean()) == pytest.approx(0.1, abs=0.002)
        assert float(noisy[far].std()) == pytest.approx(0.05, rel=0.05)
        assert float(noisy[source].mean()) > 0.6  # vessels bright
    with pytest.raises(ParameterError) as caught:
        vessel_image(mask, 0, blur=-1.0)
    assert caught.value.field == "/blur"


# The command: every kind, read back -----------------------------------------------------

NETWORK_STEMS = [
    "0.02-0.05-0",
    "0.05-0.3-0",
    "0.08-0.6-0",
    "0.02-0.05-1",
    "0.05-0.3-1",
    "0.08-0.6-1",
]
NETWORK_SETTINGS = [(0.02, 0.05), (0.05, 0.3), (0.08, 0.6)]
DEMO_SEED = 11

EXPECTED_FILES = {
    "network": {f"network-{stem}.{ext}" for stem in NETWORK_STEMS for ext in ("json", "graphml")},
    "cells": {f"cells-{pattern}-{k}.csv" for pattern in PATTERNS for k in range(4)}
    | {f"layout-{kind}.{ext}" for kind in LAYOUTS for ext in ("csv", "geojson")},
    "masks": {f"vessels-{stem}.png" for stem in NETWORK_STEMS[:3]}
    | {f"tubes-{k}.tif" for k in range(3)},
    "images": {
        f"{name}.{ext}"
        for name in [*(f"vessels-{s}" for s in NETWORK_STEMS[:3]), "tubes-0", "tubes-1", "tubes-2"]
        for ext in ("npy", "tif")
    },
}
"""What ``all`` writes with the default counts (network 6, cells 12, masks 3, images 3)."""


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The default ``all`` of the command, seed 11."""
    out = tmp_path_factory.mktemp("demo")
    started = time.perf_counter()
    completed = run_cli("--out", str(out), "--seed", str(DEMO_SEED))
    elapsed = time.perf_counter() - started
    assert completed.returncode == 0, completed.stderr
    print(f"python -m workers.scenario all: {elapsed:.1f} s")
    return out


def test_all_writes_every_kind_with_a_readme(demo: Path) -> None:
    assert {path.name for path in demo.iterdir()} == set(EXPECTED_FILES)
    for kind, names in EXPECTED_FILES.items():
        assert {path.name for path in (demo / kind).iterdir()} == names | {"README.txt"}
        readme = " ".join((demo / kind / "README.txt").read_text(encoding="utf-8").split())
        assert "The data are SYNTHETIC" in readme
        assert "generated by workers.scenario" in readme
        assert "describe no real sample" in readme
        assert "research-use demos only, and not for diagnosis or treatment decisions" in readme
        assert all(name in readme for name in names)
        assert f"seed {DEMO_SEED}" in readme


def test_graphml_holds_the_graph_of_the_json_request(demo: Path) -> None:
    limits = limits_of(Settings())
    for stem in NETWORK_STEMS:
        given = json.loads((demo / "network" / f"network-{stem}.json").read_text())["input"]
        path = demo / "network" / f"network-{stem}.graphml"
        # Reference library networkx: read_graphml.
        g = nx.read_graphml(path, node_type=int)
        assert list(g.nodes) == list(range(len(given["nodes"])))
        assert [[g.nodes[n]["x"], g.nodes[n]["y"]] for n in g.nodes] == given["nodes"]
        assert [g.nodes[n]["radius"] for n in g.nodes] == given["radius"]
        assert all(isinstance(g.nodes[0][key], float) for key in ("x", "y", "radius"))
        edge_set = {frozenset(e) for e in given["edges"]}
        assert g.number_of_edges() == len(given["edges"])
        assert {frozenset(e) for e in g.edges} == edge_set
        # And the service's own GraphML reader (what a multipart upload goes through).
        arrays = decode_graph(path.read_bytes(), limits)
        assert np.array_equal(arrays.coordinates, np.array(given["nodes"]))
        assert arrays.radius is not None
        assert np.array_equal(arrays.radius, np.array(given["radius"]))
        assert {frozenset(e) for e in arrays.edges.tolist()} == edge_set


def test_cell_tables_read_back_with_the_csv_module(demo: Path) -> None:
    for i in range(12):
        pattern = PATTERNS[i % 3]
        path = demo / "cells" / f"cells-{pattern}-{i // 3}.csv"
        with path.open(newline="", encoding="utf-8") as table:
            reader = csv.DictReader(table)  # reference reader: the csv module
            rows = list(reader)
        assert reader.fieldnames == ["x", "y", "population"]
        points, populations = cell_layout(pattern, DEMO_SEED + i)
        assert [row["population"] for row in rows] == populations.tolist()
        table_points = np.array([[float(row["x"]), float(row["y"])] for row in rows])
        assert np.max(np.abs(table_points - points)) <= 5e-4  # 3 decimals


def test_layout_files_read_back_as_csv_and_geojson(demo: Path) -> None:
    readme = (demo / "cells" / "README.txt").read_text(encoding="utf-8")
    assert "NOT\nlongitude and latitude" in readme and "RFC 7946" in readme
    for kind in LAYOUTS:
        points, labels = two_population_layout(kind, 2000, 500, 0.05, DEMO_SEED)
        classes = [CLASS_NAMES[code] for code in labels.tolist()]
        with (demo / "cells" / f"layout-{kind}.csv").open(newline="", encoding="utf-8") as table:
            reader = csv.DictReader(table)  # reference reader: the csv module
            rows = list(reader)
        assert reader.fieldnames == ["x", "y", "class"]
        assert [row["class"] for row in rows] == classes
        table_points = np.array([[float(row["x"]), float(row["y"])] for row in rows])
        assert np.max(np.abs(table_points - points)) <= 5e-4  # 3 decimals
        # GeoJSON (RFC 7946): a FeatureCollection (3.3) of Features (3.2) with Point
        # geometries (3.1.2) whose coordinates are a position of two numbers (3.1.1), read by
        # the json module.
        collection = json.loads((demo / "cells" / f"layout-{kind}.geojson").read_bytes())
        assert set(collection) == {"type", "features"}
        assert collection["type"] == "FeatureCollection"
        features = collection["features"]
        assert len(features) == 2500
        for feature in features:
            assert set(feature) == {"type", "geometry", "properties"}
            assert feature["type"] == "Feature"
            assert feature["geometry"]["type"] == "Point"
            position = feature["geometry"]["coordinates"]
            assert len(position) == 2 and all(type(v) is float for v in position)
        assert [f["properties"] for f in features] == [{"class": name} for name in classes]
        geo_points = np.array([f["geometry"]["coordinates"] for f in features])
        assert np.array_equal(geo_points, table_points)  # the same cells as the table


def test_masks_read_back_with_pillow_and_tifffile(demo: Path) -> None:
    limits = limits_of(Settings())
    for i, stem in enumerate(NETWORK_STEMS[:3]):
        path = demo / "masks" / f"vessels-{stem}.png"
        with Image.open(path) as png:  # reference reader: Pillow
            assert png.format == "PNG" and png.mode == "L"
            pixels = np.asarray(png)
        branch, fusion = NETWORK_SETTINGS[i]
        network = capillary_network(
            branch_probability=branch, fusion_probability=fusion, seed=DEMO_SEED + i
        )
        expected = network_mask(network, spacing=2.0)
        assert set(np.unique(pixels).tolist()) == {0, 255}
        assert np.array_equal(pixels == 255, expected)
        assert np.array_equal(decode_array(path.read_bytes(), limits), pixels)
    for i in range(3):
        path = demo / "masks" / f"tubes-{i}.tif"
        with tifffile.TiffFile(path) as tif:  # reference reader: tifffile
            assert len(tif.pages) == 48  # one page per plane
            volume = tif.asarray()
        assert volume.shape == (48, 64, 64) and volume.dtype == np.uint8
        assert set(np.unique(volume).tolist()) == {0, 255}
        assert np.array_equal(volume == 255, tube_volume(DEMO_SEED + i))
        assert np.array_equal(decode_array(path.read_bytes(), limits), volume)


def test_images_read_back_as_npy_and_tiff(demo: Path) -> None:
    limits = limits_of(Settings())
    masks = [
        np.asarray(Image.open(demo / "masks" / f"vessels-{stem}.png")) == 255
        for stem in NETWORK_STEMS[:3]
    ]
    masks += [tifffile.imread(demo / "masks" / f"tubes-{i}.tif") == 255 for i in range(3)]
    names = [f"vessels-{stem}" for stem in NETWORK_STEMS[:3]] + [f"tubes-{i}" for i in range(3)]
    for k, (name, mask) in enumerate(zip(names, masks, strict=True)):
        array = np.load(demo / "images" / f"{name}.npy", allow_pickle=False)
        assert array.dtype == np.float32 and array.shape == mask.shape
        assert np.array_equal(tifffile.imread(demo / "images" / f"{name}.tif"), array)
        noise_seed = DEMO_SEED + k % 3
        assert np.array_equal(array, vessel_image(mask, noise_seed, blur=1.5, noise=0.05))
        path = demo / "images" / f"{name}.tif"
        assert np.array_equal(decode_array(path.read_bytes(), limits), array)


def test_same_seed_same_files_and_another_seed_other_files(tmp_path: Path) -> None:
    # Common practice: seeded generators and writers without timestamps replay byte for byte.
    runs = {}
    for label, seed in (("a", "5"), ("b", "5"), ("c", "6")):
        completed = run_cli("all", "--out", str(tmp_path / label), "--count", "1", "--seed", seed)
        assert completed.returncode == 0, completed.stderr
        runs[label] = {
            path.relative_to(tmp_path / label): path.read_bytes()
            for path in sorted((tmp_path / label).rglob("*"))
            if path.is_file()
        }
    assert runs["a"] == runs["b"]
    assert runs["a"].keys() == runs["c"].keys()
    assert all(runs["a"][name] != runs["c"][name] for name in runs["a"])


def test_one_kind_writes_into_the_directory_itself(tmp_path: Path) -> None:
    completed = run_cli("cells", "--out", str(tmp_path), "--count", "5")
    assert completed.returncode == 0, completed.stderr
    assert {path.name for path in tmp_path.iterdir()} == {
        "cells-mixed-0.csv",
        "cells-segregated-0.csv",
        "cells-surrounding-0.csv",
        "cells-mixed-1.csv",
        "cells-segregated-1.csv",
        *(f"layout-{kind}.{ext}" for kind in LAYOUTS for ext in ("csv", "geojson")),
        "README.txt",
    }


def test_usage_errors_answer_without_importing_numpy() -> None:
    code = (
        "import runpy, sys\n"
        "sys.argv = ['workers.scenario', 'trees', '--out', 'x']\n"
        "try:\n"
        "    runpy.run_module('workers.scenario', run_name='__main__', alter_sys=True)\n"
        "except SystemExit as stop:\n"
        "    print(stop.code, 'numpy' in sys.modules)\n"
    )
    completed = subprocess.run(
        [sys.executable, "-c", code],
        capture_output=True,
        text=True,
        cwd=Path(__file__).resolve().parents[2],
    )
    assert completed.stdout.split() == ["2", "False"], completed.stderr


def test_readme_picture_is_current() -> None:
    # Like openapi/openapi.json, the committed picture is generated (make openapi); this fails
    # when the drawing, the engine or the demo data change without regenerating it.
    from workers.scenario.picture import readme_picture

    committed = Path(__file__).resolve().parents[2] / "openapi" / "examples" / "diagram.svg"
    assert committed.read_bytes() == readme_picture(), "run make openapi"
