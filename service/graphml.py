"""Graphs uploaded as GraphML (an open standard), the ``data`` part of a multipart job request.

Nodes take their coordinates from the node attributes ``x``, ``y`` and, in 3D, ``z``; an
optional node attribute ``radius`` and edge attribute ``length`` are read too. Node positions
follow the order of the nodes in the file. Edges are undirected; repeated and self-loop edges
are kept here and dropped (with a warning) by the job, as for JSON graphs.

A first pass with expat, before networkx parses the file, refuses what GraphML does not need
or networkx would read silently wrong: a document type declaration or entity (entity expansion
is how a small XML file becomes a huge one; expat sees them in any encoding), more than one
graph, repeated node ids, and coordinates declared as anything but numbers.
"""

import math
import re
import xml.parsers.expat
from collections import Counter
from typing import Any

import networkx as nx
import numpy as np

from service.errors import RequestInvalid
from workers.spec import FieldError, Limits
from workers.spec.inputs import MAX_GRAPH_MAGNITUDE
from workers.spec.kinds.graphs import GraphArrays
from workers.spec.kinds.pixels import UPLOAD_POINTER

__all__ = ["decode_graph"]

_NUMERIC = {"int", "long", "float", "double"}
_READ = ("x", "y", "z", "radius", "length")


def _refused(message: str) -> RequestInvalid:
    return RequestInvalid([FieldError(pointer=UPLOAD_POINTER, message=message)])


def _number(value: Any, what: str) -> float:
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise _refused(f"{what} is {str(value)[:40]!r}, not a number") from None
    if not math.isfinite(number):
        raise _refused(f"{what} is {number!r}; coordinates and lengths must be finite")
    return number


class _Refusal(Exception):
    """Raised inside expat's handlers to stop the first pass."""


def _first_pass(data: bytes) -> None:
    """Check the file's structure with expat (RequestInvalid at /data for what is refused)."""
    counts: Counter[str] = Counter()
    ids: set[str] = set()

    def declaration(*_: Any) -> None:
        raise _Refusal(
            "the GraphML file has a DOCTYPE or ENTITY declaration; GraphML needs none, and "
            "they are refused"
        )

    def element(name: str, attributes: dict[str, str]) -> None:
        local = name.rsplit(" ", 1)[-1]
        counts[local] += 1
        if local == "node":
            ids.add(attributes.get("id", ""))
        if local == "key" and attributes.get("attr.name") in _READ:
            kind = attributes.get("attr.type", "string")
            if kind not in _NUMERIC and attributes.get("for", "all") in ("node", "edge", "all"):
                raise _Refusal(
                    f"the GraphML key {attributes.get('attr.name')!r} is declared as {kind!r}; "
                    "x, y, z, radius and length must be int, long, float or double"
                )

    parser = xml.parsers.expat.ParserCreate(namespace_separator=" ")
    parser.StartDoctypeDeclHandler = declaration
    parser.EntityDeclHandler = declaration
    parser.StartElementHandler = element
    try:
        parser.Parse(data, True)
    except _Refusal as refusal:
        raise _refused(str(refusal)) from None
    except xml.parsers.expat.ExpatError as error:
        raise _refused(f"the file is not GraphML: not well-formed XML ({error})") from None
    if counts["graph"] != 1:
        raise _refused(
            f"the GraphML file has {counts['graph']} graph elements; send one graph per file"
        )
    if len(ids) != counts["node"]:
        raise _refused(
            f"the GraphML file has {counts['node']} node elements but {len(ids)} distinct node "
            "ids; every node needs an id of its own"
        )


def decode_graph(data: bytes, limits: Limits) -> GraphArrays:
    """The graph in an uploaded GraphML file, as arrays; RequestInvalid at ``/data`` for files
    that are too large, not GraphML, or lack coordinates."""
    if len(data) > limits.max_body_bytes:
        raise _refused(
            f"the GraphML file has {len(data)} bytes, above the limit of {limits.max_body_bytes} "
            "for a graph file"
        )
    _first_pass(data)
    try:
        graph = nx.parse_graphml(data, force_multigraph=True)
    except Exception as error:  # the XML parser and networkx raise many types on bad files
        text = re.sub(r"<[^<>]*>", "...", str(error))
        raise _refused(
            f"the file cannot be read as GraphML: {type(error).__name__}: {text}"
        ) from None
    names = list(graph.nodes)
    if not names:
        raise _refused("the GraphML file has no nodes; a graph needs at least one")
    if len(names) > limits.max_graph_nodes:
        raise _refused(
            f"the GraphML file has {len(names)} nodes, above the limit of "
            f"{limits.max_graph_nodes} per graph"
        )
    if graph.number_of_edges() > limits.max_graph_edges:
        raise _refused(
            f"the GraphML file has {graph.number_of_edges()} edges, above the limit "
            f"of {limits.max_graph_edges} per graph"
        )
    first = graph.nodes[names[0]]
    axes = ["x", "y", "z"] if "z" in first else ["x", "y"]
    coordinates = np.empty((len(names), len(axes)), dtype=np.float64)
    has_radius = any("radius" in attributes for _, attributes in graph.nodes(data=True))
    radius = np.empty(len(names)) if has_radius else None
    for row, name in enumerate(names):
        attributes = graph.nodes[name]
        for column, axis in enumerate(axes):
            if axis not in attributes:
                raise _refused(
                    f"node {name!r} has no {axis} attribute; GraphML nodes need x and y (and z "
                    f"for 3D) coordinates{' like the first node' if axis == 'z' else ''}"
                )
            coordinates[row, column] = _number(attributes[axis], f"{axis} of node {name!r}")
        if "z" not in axes and "z" in attributes:
            raise _refused(
                f"node {name!r} has a z attribute but the first node has none; give "
                "every node the same coordinates"
            )
        if radius is not None:
            if "radius" not in attributes:
                raise _refused(
                    f"node {name!r} has no radius attribute; give it to every node or to none"
                )
            radius[row] = _number(attributes["radius"], f"radius of node {name!r}")
    position = {name: row for row, name in enumerate(names)}
    edge_list = list(graph.edges(data=True))
    edges = np.array([(position[u], position[v]) for u, v, _ in edge_list], dtype=np.int64)
    length = None
    if any("length" in attributes for _, _, attributes in edge_list):
        length = np.empty(len(edge_list))
        for row, (u, v, attributes) in enumerate(edge_list):
            if "length" not in attributes:
                raise _refused(
                    f"edge {u!r}-{v!r} has no length attribute; give it to every edge or to none"
                )
            length[row] = _number(attributes["length"], f"length of edge {u!r}-{v!r}")
    for values in (radius, length):
        if values is not None and ((values < 0) | (values > MAX_GRAPH_MAGNITUDE)).any():
            raise _refused(
                f"radius and length attributes must be between 0 and {MAX_GRAPH_MAGNITUDE:g}"
            )
    return GraphArrays(
        coordinates=coordinates, edges=edges.reshape(-1, 2), radius=radius, length=length
    )
