"""service.graphml against networkx's GraphML reader (the reference of what a GraphML file
means): the same nodes in the same order, the same coordinates and attributes, the same
edges; the limits hold while the file streams past, and memory follows the arrays.

HTTP answers to bad GraphML are in test_bad_inputs.py and test_graphs_api.py.
"""

import io
import tempfile
import tracemalloc
from collections import Counter
from pathlib import Path
from typing import IO

import networkx as nx
import numpy as np
import pytest

from service.errors import RequestInvalid
from service.extension import limits_of
from service.graphml import decode_graph
from service.settings import Settings
from workers.scenario.capillaries import capillary_network
from workers.spec.kinds.graphs import GraphArrays

LIMITS = limits_of(Settings())
HEAD = (
    '<?xml version="1.0" encoding="UTF-8"?><graphml xmlns="http://graphml.graphdrawing.org/xmlns">'
)
KEYS = (
    '<key id="x" for="node" attr.name="x" attr.type="double"/>'
    '<key id="y" for="node" attr.name="y" attr.type="double"/>'
)


def reference(data: bytes) -> tuple[list[str], nx.MultiGraph]:
    """networkx's reading (parse_graphml, multigraph kept): node ids in order, and the graph."""
    # Its fallback for a bare <graphml> header replaces text, so that case goes in as text.
    given = data.decode() if data.startswith(b"<graphml>") else data
    graph = nx.parse_graphml(given, force_multigraph=True)
    return list(graph.nodes), graph


def assert_same(arrays: GraphArrays, data: bytes, axes: tuple[str, ...] = ("x", "y")) -> None:
    names, graph = reference(data)
    expected = [[float(graph.nodes[n][axis]) for axis in axes] for n in names]
    assert arrays.coordinates.tolist() == expected
    position = {name: row for row, name in enumerate(names)}
    ours = Counter(frozenset(pair) for pair in arrays.edges.tolist())
    theirs = Counter(frozenset((position[u], position[v])) for u, v in graph.edges())
    assert ours == theirs
    if arrays.radius is not None:
        assert arrays.radius.tolist() == [graph.nodes[n]["radius"] for n in names]
    lengths = [d["length"] for _, _, d in graph.edges(data=True) if "length" in d]
    assert sorted(arrays.length.tolist() if arrays.length is not None else []) == sorted(lengths)


def spooled(data: bytes) -> IO[bytes]:
    """The file object werkzeug hands over for an uploaded part past 500 kB."""
    stream = tempfile.TemporaryFile("w+b")
    stream.write(data)
    stream.seek(0)
    return stream


def network_graphml(sprouts: int, seed: int = 3) -> bytes:
    """A capillary network of the demo generator, written by networkx with x, y and radius."""
    network = capillary_network(
        branch_probability=0.05,
        fusion_probability=0.3,
        seed=seed,
        sprouts=sprouts,
        size=(100.0 * sprouts, 2000.0),
    )
    graph = nx.Graph()
    for row, ((x, y), radius) in enumerate(
        zip(network.coordinates.tolist(), network.radius.tolist(), strict=True)
    ):
        graph.add_node(f"v{row}", x=x, y=y, radius=radius)
    graph.add_edges_from((f"v{u}", f"v{v}") for u, v in network.edges.tolist())
    stream = io.BytesIO()
    nx.write_graphml(graph, stream)
    return stream.getvalue()


def test_a_generated_network_reads_as_networkx_reads_it() -> None:
    data = network_graphml(6)
    with spooled(data) as stream:
        arrays = decode_graph(stream, LIMITS)
    assert len(arrays.coordinates) > 1000
    assert_same(arrays, data)


def test_the_demo_files_read_as_networkx_reads_them(tmp_path: Path) -> None:
    from workers.scenario.writers import write_networks

    for path in write_networks(tmp_path, 2, seed=11):
        if path.suffix == ".graphml":
            with path.open("rb") as stream:
                assert_same(decode_graph(stream, LIMITS), path.read_bytes())


GRAPHS = {
    "edges before nodes": KEYS + '<graph edgedefault="undirected"><edge source="a" target="b"/>'
    '<node id="b"><data key="x">1</data><data key="y">0</data></node>'
    '<node id="a"><data key="x">0</data><data key="y">2.5</data></node></graph>',
    "repeated edges and a self-loop": KEYS + '<graph edgedefault="undirected">'
    '<node id="a"><data key="x">0</data><data key="y">0</data></node>'
    '<node id="b"><data key="x">1</data><data key="y">0</data></node>'
    '<edge source="a" target="b"/><edge source="b" target="a"/><edge source="a" target="a"/>'
    "</graph>",
    "integer coordinates and a directed graph": KEYS.replace('"double"', '"int"')
    + '<graph edgedefault="directed">'
    '<node id="a"><data key="x">3</data><data key="y"> -4 </data></node>'
    '<node id="b"><data key="x">1</data><data key="y">0</data></node>'
    '<edge source="b" target="a"/></graph>',
    "nodes outside the graph are not the graph's": KEYS
    + "<desc>a test</desc>"
    + '<graph edgedefault="undirected"><desc>nodes a and b</desc>'
    '<node id="a"><data key="x">0</data><data key="y">0</data></node>'
    '<group><node id="c"><data key="x">7</data><data key="y">7</data></node></group>'
    '<node id="b"><data key="x">1</data><data key="y">0</data></node>'
    '<edge source="a" target="b"/></graph>'
    '<extra><node id="d"><data key="x">9</data><data key="y">9</data></node></extra>',
    "radius and length, data in any order": KEYS
    + '<key id="r" for="node" attr.name="radius" attr.type="float"/>'
    '<key id="l" for="edge" attr.name="length" attr.type="double"/>'
    '<key id="w" for="edge" attr.name="weight" attr.type="string"/>'
    '<graph edgedefault="undirected">'
    '<node id="a"><data key="r">0.5</data><data key="y">0</data><data key="x">0</data></node>'
    '<node id="b"><data key="x">1e1</data><data key="y">0</data><data key="r">1</data></node>'
    '<edge source="a" target="b"><data key="w">thick</data><data key="l">12.5</data></edge>'
    "</graph>",
}


@pytest.mark.parametrize("body", GRAPHS.values(), ids=GRAPHS.keys())
def test_graphs_read_as_networkx_reads_them(body: str) -> None:
    data = (HEAD + body + "</graphml>").encode()
    assert_same(decode_graph(data, LIMITS), data)


def test_three_dimensional_nodes_read_as_networkx_reads_them() -> None:
    keys = KEYS + '<key id="z" for="node" attr.name="z" attr.type="double"/>'
    nodes = "".join(
        f'<node id="{k}"><data key="x">{k}</data><data key="y">1</data>'
        f'<data key="z">{-k}</data></node>'
        for k in range(3)
    )
    data = (HEAD + keys + f'<graph edgedefault="undirected">{nodes}</graph></graphml>').encode()
    arrays = decode_graph(data, LIMITS)
    assert arrays.coordinates.shape == (3, 3)
    assert_same(arrays, data, ("x", "y", "z"))


def test_a_header_without_the_namespace_reads_as_networkx_reads_it() -> None:
    # networkx's parse_graphml takes a bare <graphml> as GraphML (its documented fallback).
    data = (
        "<graphml>" + KEYS + '<graph edgedefault="undirected">'
        '<node id="a"><data key="x">0</data><data key="y">1</data></node>'
        "</graph></graphml>"
    ).encode()
    assert_same(decode_graph(data, LIMITS), data)


def test_yed_node_geometry_gives_the_coordinates_as_networkx_reads_them() -> None:
    # yEd writes coordinates as a Geometry element inside its graphics data (networkx reads
    # x and y from it).
    y = "http://www.yworks.com/xml/graphml"
    data = (
        f'<graphml xmlns="http://graphml.graphdrawing.org/xmlns" xmlns:y="{y}">'
        '<key id="g" for="node" yfiles.type="nodegraphics"/>'
        '<graph edgedefault="undirected">'
        '<node id="a"><data key="g"><y:ShapeNode><y:Geometry x="1.5" y="-2"/></y:ShapeNode>'
        "</data></node>"
        '<node id="b"><data key="g"><y:ShapeNode><y:Geometry x="4" y="0"/></y:ShapeNode>'
        '</data></node><edge source="a" target="b"/></graph></graphml>'
    ).encode()
    arrays = decode_graph(data, LIMITS)
    assert arrays.coordinates.tolist() == [[1.5, -2.0], [4.0, 0.0]]
    assert_same(arrays, data)


def _over_the_limit_then_broken(nodes: int, edges: int) -> bytes:
    """A file whose first nodes and edges are fine and whose rest is not XML at all: a refusal
    that names the limit shows the parse stopped there, before reading the rest."""
    body = "".join(
        f'<node id="n{k}"><data key="x">{k}</data><data key="y">0</data></node>'
        for k in range(nodes)
    )
    body += '<edge source="n0" target="n1"/>' * edges
    return (HEAD + KEYS + '<graph edgedefault="undirected">' + body + "<<<not xml").encode()


def test_the_node_limit_holds_while_the_file_streams_past() -> None:
    limits = LIMITS.model_copy(update={"max_graph_nodes": 5})
    with pytest.raises(RequestInvalid, match="more than 5 nodes"):
        decode_graph(_over_the_limit_then_broken(6, 0), limits)


def test_the_edge_limit_holds_while_the_file_streams_past() -> None:
    limits = LIMITS.model_copy(update={"max_graph_edges": 3})
    with pytest.raises(RequestInvalid, match="more than 3 edges"):
        decode_graph(_over_the_limit_then_broken(2, 4), limits)


def test_the_file_is_refused_when_the_same_limits_allow_it_and_it_is_broken() -> None:
    # The meta-check of the two above: without the limits the broken rest is what is refused.
    with pytest.raises(RequestInvalid, match="not well-formed"):
        decode_graph(_over_the_limit_then_broken(6, 4), LIMITS)


def test_memory_follows_the_arrays_not_the_xml_tree() -> None:
    # The reference reads the whole tree and a networkx graph; the stream keeps flat arrays.
    data = network_graphml(12, seed=5)

    def peak(read: object) -> int:
        tracemalloc.start()
        try:
            assert callable(read)
            read()
            return tracemalloc.get_traced_memory()[1]
        finally:
            tracemalloc.stop()

    ours = peak(lambda: decode_graph(data, LIMITS))
    theirs = peak(lambda: nx.parse_graphml(data, force_multigraph=True))
    arrays = decode_graph(data, LIMITS)
    assert ours * 4 < theirs, (ours, theirs)
    assert ours < 20 * (arrays.coordinates.nbytes + arrays.edges.nbytes) + len(data), ours
    assert np.isfinite(arrays.coordinates).all()
