"""Vessel graphs over HTTP: JSON and GraphML give the same answer, diagrams equal gudhi's,
descriptors equal networkx's counts, skeletons of masks have the expected shape, and every bad
input is a 422 naming its field, never a 500.

Requests go through ``call`` (tests/support/api.py), so no answer may be a 500.
"""

import io
from typing import Any

import networkx as nx
import numpy as np
import pytest
from flask.testing import FlaskClient

from tests.support.api import (
    JOBS,
    WAIT,
    call,
    pairs_array,
    post,
    problem_of,
    refused,
    result_of,
    said,
)
from tests.support.references import gudhi_graph_diagrams
from tests.support.synthetic import ring_mask


@pytest.fixture
def client(served_client: FlaskClient) -> FlaskClient:
    """Every test of this module may run jobs: the module's app and worker (conftest)."""
    return served_client


def random_graph(seed: int, n: int = 60, radius: float = 0.22) -> tuple[np.ndarray, np.ndarray]:
    """A random geometric graph in the unit square: coordinates (n, 2), edges (m, 2)."""
    rng = np.random.default_rng(seed)
    points = rng.uniform(size=(n, 2))
    close = np.linalg.norm(points[:, None] - points[None], axis=2) < radius
    u, v = np.nonzero(np.triu(close, 1))
    return points, np.column_stack([u, v])


def graph_body(points: np.ndarray, edges: np.ndarray, **rest: Any) -> dict[str, Any]:
    return {
        "input": {"type": "graph", "nodes": points.tolist(), "edges": edges.tolist()},
        **rest,
    }


def diagrams_of(result: dict[str, Any]) -> list[np.ndarray]:
    return [pairs_array(d["pairs"]) for d in result["diagrams"]]


# --- diagrams against gudhi ------------------------------------------------------------------


@pytest.mark.parametrize("seed", [1, 2])
def test_height_diagrams_equal_gudhi_simplex_tree(client: FlaskClient, seed: int) -> None:
    points, edges = random_graph(seed)
    result = result_of(
        client, graph_body(points, edges, filtration={"type": "height", "direction": [0, 2]})
    )
    assert result["value_convention"] == "height"
    expected = gudhi_graph_diagrams(points[:, 1], edges)  # unit direction (0, 1): y
    for found, wanted in zip(diagrams_of(result), expected, strict=True):
        np.testing.assert_allclose(found, wanted, rtol=0, atol=1e-12)


def test_radial_and_attribute_diagrams_equal_gudhi(client: FlaskClient) -> None:
    points, edges = random_graph(3)
    center = [0.5, 0.5]
    radial = result_of(
        client, graph_body(points, edges, filtration={"type": "radial", "center": center})
    )
    distances = np.hypot(points[:, 0] - 0.5, points[:, 1] - 0.5)
    for found, wanted in zip(
        diagrams_of(radial), gudhi_graph_diagrams(distances, edges), strict=True
    ):
        np.testing.assert_allclose(found, wanted, rtol=0, atol=1e-12)
    values = np.random.default_rng(3).integers(0, 5, len(points)).astype(float)  # many ties
    given = result_of(
        client,
        graph_body(points, edges, filtration={"type": "attribute", "values": values.tolist()}),
    )
    assert given["value_convention"] == "node_value" and given["units"] is None
    for found, wanted in zip(diagrams_of(given), gudhi_graph_diagrams(values, edges), strict=True):
        np.testing.assert_array_equal(found, wanted)


def test_geodesic_growth_along_a_path_and_unreached_nodes(client: FlaskClient) -> None:
    # A path 0-1-2-3 with unit steps plus a separate edge 4-5: from seed 0 the nodes enter at
    # 0, 1, 2, 3 (sum of edge lengths), 4 and 5 are never reached (worked example).
    points = np.array([[0, 0], [1, 0], [2, 0], [3, 0], [0, 5], [1, 5]], dtype=float)
    edges = np.array([[0, 1], [1, 2], [2, 3], [4, 5]])
    result = result_of(
        client, graph_body(points, edges, filtration={"type": "geodesic", "seeds": [0]})
    )
    assert result["value_convention"] == "geodesic_distance"
    assert result["unreached_nodes"] == 2
    assert result["diagrams"][0]["pairs"] == [[0.0, None]]  # one piece, growing from 0
    assert result["diagrams"][1]["pairs"] == []


def test_count_of_directions_gives_evenly_spaced_sweeps(client: FlaskClient) -> None:
    points, edges = random_graph(4)
    result = result_of(
        client, graph_body(points, edges, filtration={"type": "height", "directions": 4})
    )
    sweeps = result["per_direction"]
    units = [[1.0, 0.0], [0.0, 1.0], [-1.0, 0.0], [0.0, -1.0]]  # angles 2 pi k / 4
    np.testing.assert_allclose([s["direction"] for s in sweeps], units, rtol=0, atol=1e-15)
    for sweep in sweeps:
        expected = gudhi_graph_diagrams(points @ np.array(sweep["direction"]), edges)
        found = [pairs_array(d["pairs"]) for d in sweep["diagrams"]]
        for got, wanted in zip(found, expected, strict=True):
            np.testing.assert_allclose(got, wanted, rtol=0, atol=1e-12)


def test_betti_curves_follow_the_sublevel_graphs(client: FlaskClient) -> None:
    # beta0(t) and beta1(t) of the sublevel graph, counted with networkx (reference library),
    # against the betti_curve features; Euler's formula V - E = b0 - b1 (common practice).
    points, edges = random_graph(5)
    grid = {"t_range": [0, 1], "samples": 11, "infinite": "cap", "cap": 2}
    result = result_of(
        client,
        graph_body(
            points,
            edges,
            filtration={"type": "height", "direction": [1, 0]},
            features=[
                {"type": "betti_curve", "dim": 0, **grid},
                {"type": "betti_curve", "dim": 1, **grid},
            ],
        ),
    )
    b0, b1 = (vector["values"] for vector in result["vectors"])
    for index, t in enumerate(np.linspace(0, 1, 11)):
        inside = [node for node in range(len(points)) if points[node, 0] <= t]
        sub = nx.Graph()
        sub.add_nodes_from(inside)
        sub.add_edges_from(
            (int(u), int(v)) for u, v in edges if points[u, 0] <= t and points[v, 0] <= t
        )
        assert b0[index] == nx.number_connected_components(sub)
        assert b1[index] == len(nx.cycle_basis(sub))
        assert sub.number_of_nodes() - sub.number_of_edges() == b0[index] - b1[index]


# --- descriptors and the graph output --------------------------------------------------------


def test_descriptors_match_networkx_without_a_filtration(client: FlaskClient) -> None:
    points, edges = random_graph(6, radius=0.15)
    result = result_of(
        client, graph_body(points, edges, output=["descriptors"], descriptors={"direction": [0, 1]})
    )
    reference = nx.Graph()
    reference.add_nodes_from(range(len(points)))
    reference.add_edges_from(edges.tolist())
    degrees = np.array([degree for _, degree in reference.degree()])
    found = result["descriptors"]
    # networkx (reference library): components, cycle basis and degrees.
    assert found["component_count"] == nx.number_connected_components(reference)
    assert found["cycle_count"] == len(nx.cycle_basis(reference))
    assert found["tip_count"] == int((degrees == 1).sum())
    assert found["branch_point_count"] == int((degrees >= 3).sum())
    lengths = np.linalg.norm(points[edges[:, 0]] - points[edges[:, 1]], axis=1)
    assert found["total_length"] == pytest.approx(lengths.sum(), rel=1e-12)
    assert found["extent"] == pytest.approx(np.ptp(points[:, 1]), rel=1e-12)
    assert result["diagrams"] == [] and result["value_convention"] is None


def test_shells_split_the_length(client: FlaskClient) -> None:
    points, edges = random_graph(7)
    result = result_of(
        client,
        graph_body(
            points,
            edges,
            output=["descriptors"],
            descriptors={"shells": {"center": [0.5, 0.5], "radii": [0, 0.25, 0.5, 1.0]}},
        ),
    )
    shells = result["shells"]
    assert [(s["inner_radius"], s["outer_radius"]) for s in shells] == [
        (0, 0.25),
        (0.25, 0.5),
        (0.5, 1.0),
    ]
    # Every edge midpoint of the unit square lies within 1 of its centre, so the shells
    # partition the edges: their lengths add up to the whole (by construction of the shells).
    total = sum(s["descriptors"]["total_length"] for s in shells)
    assert total == pytest.approx(result["descriptors"]["total_length"], rel=1e-12)


def test_self_loops_and_repeated_edges_are_dropped_with_warnings(client: FlaskClient) -> None:
    points = np.array([[0, 0], [1, 0], [1, 1]], dtype=float)
    edges = np.array([[0, 1], [1, 1], [1, 2], [1, 0], [2, 0]])
    result = result_of(
        client,
        graph_body(
            points,
            edges,
            filtration={"type": "height", "direction": [1, 0]},
            output=["diagrams", "graph", "descriptors"],
        ),
    )
    assert [w["pointer"] for w in result["warnings"]] == ["/input/edges/1", "/input/edges/3"]
    assert "self-loop" in result["warnings"][0]["message"]
    assert result["graph"]["edges"] == [[0, 1], [1, 2], [2, 0]]
    # One triangle: one cycle (E - V + b0 = 3 - 3 + 1; common practice).
    assert result["descriptors"]["cycle_count"] == 1
    assert len(result["diagrams"][1]["pairs"]) == 1


# --- GraphML uploads -------------------------------------------------------------------------


def graphml_bytes(points: np.ndarray, edges: np.ndarray) -> bytes:
    """The graph written by networkx (reference library) as GraphML with x, y attributes."""
    graph = nx.Graph()
    for node, (x, y) in enumerate(points.tolist()):
        graph.add_node(f"n{node}", x=x, y=y)
    graph.add_edges_from((f"n{u}", f"n{v}") for u, v in edges.tolist())
    stream = io.BytesIO()
    nx.write_graphml(graph, stream)
    return stream.getvalue()


def upload(client: FlaskClient, request: str, data: bytes) -> Any:
    return call(
        client,
        "POST",
        JOBS,
        headers=WAIT,
        content_type="multipart/form-data",
        data={"request": request, "data": (io.BytesIO(data), "graph.graphml")},
    )


def test_graphml_upload_equals_json(client: FlaskClient) -> None:
    points, edges = random_graph(8)
    filtration = '{"type": "height", "direction": [0, 1]}'
    uploaded = upload(
        client,
        '{"input": {"type": "graph"}, "filtration": ' + filtration + "}",
        graphml_bytes(points, edges),
    )
    assert uploaded.status_code == 200, uploaded.get_data(as_text=True)
    sent = result_of(
        client, graph_body(points, edges, filtration={"type": "height", "direction": [0, 1]})
    )
    got = uploaded.get_json()
    assert got["diagrams"] == sent["diagrams"]
    assert got["provenance"]["input_sha256"] == sent["provenance"]["input_sha256"]


def test_graphml_without_coordinates_is_422(client: FlaskClient) -> None:
    graph = nx.path_graph(3)
    stream = io.BytesIO()
    nx.write_graphml(graph, stream)
    response = upload(
        client, '{"input": {"type": "graph"}, "output": ["descriptors"]}', stream.getvalue()
    )
    refused(response, ["/data"], "no x attribute")


def test_graphml_with_entity_declarations_is_refused_unparsed(client: FlaskClient) -> None:
    # The "billion laughs" pattern of nested entities (common practice in XML security).
    bomb = (
        b'<?xml version="1.0"?><!DOCTYPE g [<!ENTITY a "aaaaaaaaaa">'
        b'<!ENTITY b "&a;&a;&a;&a;&a;&a;&a;&a;&a;&a;">]><graphml>&b;</graphml>'
    )
    response = upload(client, '{"input": {"type": "graph"}, "output": ["descriptors"]}', bomb)
    refused(response, ["/data"], "doctype")


GRAPHML_HEAD = (
    '<?xml version="1.0" encoding="UTF-8"?>'
    '<graphml xmlns="http://graphml.graphdrawing.org/xmlns">'
    '<key id="x" for="node" attr.name="x" attr.type="double"/>'
    '<key id="y" for="node" attr.name="y" attr.type="double"/>'
    '<key id="r" for="node" attr.name="radius" attr.type="double"/>'
    '<key id="l" for="edge" attr.name="length" attr.type="double"/>'
)


def node(name: str, x: float, y: float, extra: str = "") -> str:
    return f'<node id="{name}"><data key="x">{x}</data><data key="y">{y}</data>{extra}</node>'


@pytest.mark.parametrize(
    ("body", "hint"),
    [
        # The entity declaration in UTF-16: a byte pattern cannot see it, expat does.
        (
            '<?xml version="1.0" encoding="UTF-16"?><!DOCTYPE graphml [<!ENTITY a "7">]>'
            '<graphml><graph edgedefault="undirected"></graph></graphml>',
            "doctype",
        ),
        (GRAPHML_HEAD + "</graphml>", "0 graph elements"),
        (
            GRAPHML_HEAD + '<graph edgedefault="undirected">' + node("a", 0, 0) + "</graph>"
            '<graph edgedefault="undirected">' + node("b", 0, 0) + "</graph></graphml>",
            "2 graph elements",
        ),
        (
            GRAPHML_HEAD
            + '<graph edgedefault="undirected">'
            + node("a", 0, 0)
            + node("a", 1, 1)
            + "</graph></graphml>",
            "distinct node ids",
        ),
        (
            GRAPHML_HEAD.replace(
                'attr.name="x" attr.type="double"', 'attr.name="x" attr.type="boolean"'
            )
            + '<graph edgedefault="undirected">'
            + node("a", 1, 0)
            + "</graph></graphml>",
            "declared as 'boolean'",
        ),
        (
            GRAPHML_HEAD
            + '<graph edgedefault="undirected">'
            + node("a", 0, 0)
            + node("b", 1, 0, '<data key="r">2</data>')
            + "</graph></graphml>",
            "node 'a' has no radius",
        ),
        (
            GRAPHML_HEAD
            + '<graph edgedefault="undirected">'
            + node("a", 0, 0)
            + node("b", 1, 0)
            + node("c", 2, 0)
            + '<edge source="a" target="b"/>'
            '<edge source="b" target="c"><data key="l">1</data></edge></graph></graphml>',
            "no length attribute",
        ),
    ],
    ids=[
        "utf16-entity",
        "no-graph",
        "two-graphs",
        "repeated-id",
        "boolean-x",
        "some-radius",
        "some-length",
    ],
)
def test_graphml_that_would_be_read_wrong_is_refused(
    client: FlaskClient, body: str, hint: str
) -> None:
    encoding = "utf-16" if 'encoding="UTF-16"' in body else "utf-8"
    response = upload(
        client, '{"input": {"type": "graph"}, "output": ["descriptors"]}', body.encode(encoding)
    )
    refused(response, ["/data"], hint)


def test_graphml_that_is_not_xml_is_422(client: FlaskClient) -> None:
    response = upload(
        client, '{"input": {"type": "graph"}, "output": ["descriptors"]}', b"\x93NUMPY not a graph"
    )
    refused(response, ["/data"], "graphml")


# --- skeletons of masks ----------------------------------------------------------------------


def test_skeleton_of_a_ring_mask_has_one_cycle(client: FlaskClient) -> None:
    # The centre line of an annulus is a closed curve: one component, one loop (geometry,
    # common practice).
    mask = ring_mask((60, 60), (30, 30), 12, 18).astype(int)
    result = result_of(
        client,
        {
            "input": {
                "type": "mask",
                "values": mask.tolist(),
                "skeletonize": True,
                "spacing": [0.5, 0.5],
                "units": "um",
            },
            "filtration": {"type": "radial", "center": [15.0, 15.0]},
            "output": ["diagrams", "descriptors", "graph"],
        },
    )
    found = result["descriptors"]
    assert (found["component_count"], found["cycle_count"], found["branch_point_count"]) == (
        1,
        1,
        0,
    )
    assert result["units"] == "um" and result["value_convention"] == "radial_distance"
    # The loop is born when the skeleton closes: within the ring's radii, 6 to 9 um.
    ((birth, death),) = result["diagrams"][1]["pairs"]
    assert death is None and 6.0 <= birth <= 9.0
    nodes = np.array(result["graph"]["nodes"])
    radius = np.hypot(nodes[:, 0] - 15, nodes[:, 1] - 15)
    assert 6.0 <= radius.min() and radius.max() <= 9.0


# --- bad input -------------------------------------------------------------------------------


def _graph(**fields: Any) -> dict[str, Any]:
    graph = {"type": "graph", "nodes": [[0, 0], [1, 0], [1, 1]], "edges": [[0, 1], [1, 2]]}
    return {**graph, **fields}


@pytest.mark.parametrize(
    ("body", "pointers", "hint"),
    [
        (
            {"input": _graph(edges=[[0, 1], [1, 3]]), "output": ["descriptors"]},
            ["/input/edges/1/1"],
            "numbered 0 to 2",
        ),
        ({"input": _graph(nodes=[]), "output": ["descriptors"]}, ["/input/nodes"], "no nodes"),
        (
            {"input": _graph(nodes=[[0, 0], [1, 0, 2], [1, 1]]), "output": ["descriptors"]},
            ["/input/nodes/1"],
            "same number",
        ),
        (
            {"input": _graph(), "filtration": {"type": "height", "direction": [0, 0]}},
            ["/filtration/direction"],
            "length 0",
        ),
        (
            {"input": _graph(), "filtration": {"type": "height", "direction": [0, 0, 1]}},
            ["/filtration/direction"],
            "2d nodes",
        ),
        (
            {"input": _graph(), "filtration": {"type": "geodesic", "seeds": [0, 7]}},
            ["/filtration/seeds/1"],
            "not a node",
        ),
        (
            {"input": _graph(), "filtration": {"type": "attribute", "values": [1, 2]}},
            ["/filtration/values"],
            "one per node",
        ),
        (
            {
                "input": _graph(),
                "filtration": {"type": "height", "direction": [1, 0], "max_dim": 2},
            },
            ["/filtration/max_dim"],
            "highest dimension of a graph",
        ),
        ({"input": _graph(), "filtration": {"type": "rips"}}, ["/filtration/type"], "geodesic"),
        ({"input": _graph()}, ["/filtration"], "descriptors"),
        (
            {"input": _graph(radius=[1.0]), "output": ["descriptors"]},
            ["/input/radius"],
            "one per node",
        ),
        (
            {"input": _graph(length=[1.0, 2.0, 3.0]), "output": ["descriptors"]},
            ["/input/length"],
            "one per edge",
        ),
        (
            {
                "input": _graph(),
                "output": ["descriptors"],
                "descriptors": {"shells": {"center": [0, 0]}},
            },
            ["/descriptors/shells"],
            "exactly one",
        ),
        (
            {
                "input": _graph(),
                "output": ["descriptors"],
                "descriptors": {"shells": {"center": [0, 0], "radii": [0, 2, 1]}},
            },
            ["/descriptors/shells/radii/2"],
            "increase",
        ),
        (
            {
                "input": {"type": "points", "points": [[0, 0], [1, 1]]},
                "filtration": {"type": "rips"},
                "output": ["descriptors"],
            },
            ["/output"],
            "for graphs",
        ),
        (
            {
                "input": _graph(),
                "filtration": {"type": "radial", "center": [0, 0]},
                "descriptors": {"direction": [1, 0]},
            },
            ["/descriptors"],
            "descriptors",
        ),
        (
            {
                "input": _graph(nodes=[[0, 0, 0], [1, 0, 0], [1, 1, 0]]),
                "filtration": {"type": "height", "directions": 3},
            },
            ["/filtration/directions"],
            "2d data",
        ),
        (
            {
                "input": {"type": "mask", "values": [[0, 1], [1, 1]], "skeletonize": True},
                "filtration": {"type": "attribute", "values": [1.0]},
            },
            ["/filtration/type"],
            "skeleton",
        ),
        (
            {
                "input": {"type": "mask", "values": [[0, 1], [1, 1]]},
                "filtration": {"type": "geodesic", "seeds": [0]},
            },
            ["/filtration/type"],
            "a mask takes",
        ),
        (
            {"input": _graph(edges=[[0, 2**63]]), "output": ["descriptors"]},
            ["/input/edges/0/1"],
            "less than",
        ),
        (
            {
                "input": {"type": "mask", "values": [[0, 1], [1, 1]], "skeletonize": "yes"},
                "output": ["descriptors"],
            },
            ["/input/skeletonize"],
            "valid boolean",
        ),
        (
            {
                "input": {"type": "mask", "values": [[1, 1], [1, 1]], "skeletonize": True},
                "output": ["descriptors"],
            },
            ["/input/values"],
            "no background",
        ),
        (
            {"input": _graph(), "filtration": {"type": "height", "directions": 0}},
            ["/filtration/directions"],
            "greater than or equal to 1",
        ),
        (
            {"input": _graph(), "filtration": {"type": "height", "directions": True}},
            ["/filtration/directions"],
            "valid integer",
        ),
        (
            {"input": _graph(), "filtration": {"type": "height", "directions": []}},
            ["/filtration/directions"],
            "at least 1",
        ),
    ],
    ids=[
        "edge-out-of-range",
        "empty-graph",
        "ragged-nodes",
        "zero-direction",
        "direction-dims",
        "seed-out-of-range",
        "attribute-length",
        "max-dim",
        "rips-on-graph",
        "no-filtration-for-diagrams",
        "radius-length",
        "length-length",
        "shells-neither",
        "shells-not-increasing",
        "descriptors-of-points",
        "options-without-output",
        "count-of-directions-in-3d",
        "attribute-on-skeleton",
        "geodesic-on-pixels",
        "edge-index-beyond-int64",
        "skeletonize-as-string",
        "skeleton-without-background",
        "zero-directions",
        "boolean-directions",
        "empty-directions",
    ],
)
def test_bad_graph_input_is_422_naming_the_field(
    client: FlaskClient, body: dict[str, Any], pointers: list[str], hint: str
) -> None:
    refused(post(client, JOBS, body), pointers, hint)


def test_nan_coordinate_is_422_at_the_node(client: FlaskClient) -> None:
    raw = '{"input": {"type": "graph", "nodes": [[0, 0], [NaN, 1]]}, "output": ["descriptors"]}'
    response = call(client, "POST", JOBS, data=raw, content_type="application/json")
    problem = problem_of(response, 422)
    assert problem["errors"][0]["pointer"].startswith("/input/nodes/1/0")
    assert "finite" in said(problem) or "nan" in said(problem)


@pytest.mark.parametrize(
    ("nodes", "shells", "pointer"),
    [
        ([[0, 0], [3, 4]], {"center": [0, 0], "count": 1000, "max_radius": 5e-324}, "count"),
        ([[0, 0]], {"center": [0, 0], "count": 3}, "max_radius"),
    ],
)
def test_shells_the_data_cannot_take_fail_naming_the_field(
    client: FlaskClient, nodes: list[list[float]], shells: dict[str, Any], pointer: str
) -> None:
    # Whether equal shells fit is known only from the node distances, on the worker.
    body = {
        "input": _graph(nodes=nodes, edges=[]),
        "output": ["descriptors"],
        "descriptors": {"shells": shells},
    }
    status = post(client, JOBS, body, headers=WAIT).get_json()
    assert status["status"] == "failed"
    assert status["problem"]["errors"][0]["pointer"] == f"/descriptors/shells/{pointer}"


def test_seed_beyond_a_skeleton_fails_the_job_naming_the_seed(client: FlaskClient) -> None:
    mask = np.zeros((20, 20), dtype=int)
    mask[8:12, 2:18] = 1  # a bar: its skeleton has far fewer than 10**6 nodes
    response = post(
        client,
        JOBS,
        {
            "input": {"type": "mask", "values": mask.tolist(), "skeletonize": True},
            "filtration": {"type": "geodesic", "seeds": [10**6]},
        },
        headers=WAIT,
    )
    status = response.get_json()
    assert status["status"] == "failed"
    assert status["problem"]["errors"][0]["pointer"] == "/filtration/seeds/0"
