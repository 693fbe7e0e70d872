"""Graphs uploaded as GraphML (an open standard), the ``data`` part of a multipart job request.

Nodes take their coordinates from the node attributes ``x``, ``y`` and, in 3D, ``z``; an
optional node attribute ``radius`` and edge attribute ``length`` are read too. Node positions
follow the order of the nodes in the file. Edges are undirected; repeated and self-loop edges
are kept here and dropped (with a warning) by the job, as for JSON graphs.

XML with a document type declaration is refused before parsing: entity expansion is how a
small XML file becomes a huge one, and GraphML needs none.
"""

import math
import re
from typing import Any

import networkx as nx
import numpy as np

from service.errors import RequestInvalid
from workers.spec import FieldError, Limits
from workers.spec.graphs import GraphArrays
from workers.spec.inputs import MAX_GRAPH_MAGNITUDE
from workers.spec.pixels import UPLOAD_POINTER

__all__ = ["decode_graph"]

_DECLARATIONS = re.compile(rb"<!DOCTYPE|<!ENTITY", re.IGNORECASE)


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


def decode_graph(data: bytes, limits: Limits) -> GraphArrays:
    """The graph in an uploaded GraphML file, as arrays; RequestInvalid at ``/data`` for files
    that are too large, not GraphML, or lack coordinates."""
    if len(data) > limits.max_body_bytes:
        raise _refused(
            f"the GraphML file has {len(data)} bytes, above the limit of {limits.max_body_bytes} "
            "for a graph file"
        )
    if _DECLARATIONS.search(data):
        raise _refused(
            "the GraphML file has a DOCTYPE or ENTITY declaration; GraphML needs "
            "none, and they are refused"
        )
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
    radius = np.empty(len(names)) if "radius" in first else None
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
    if edge_list and "length" in edge_list[0][2]:
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
