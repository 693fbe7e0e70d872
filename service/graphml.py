"""Graphs uploaded as GraphML (an open standard), the ``data`` part of a multipart job request.

Nodes take their coordinates from the node attributes ``x``, ``y`` and, in 3D, ``z``; an
optional node attribute ``radius`` and edge attribute ``length`` are read too (yEd's node
geometry gives x and y as well). Node positions follow the order of the nodes in the file,
edge rows the order of the edges. Edges are undirected; repeated and self-loop edges are kept
here and dropped (with a warning) by the job, as for JSON graphs. What the file means is what
networkx's GraphML reader makes of it (the tests check that); other attributes are not read.

The file is parsed incrementally with defusedxml (iterparse, each node and edge dropped once
read), straight into flat arrays, so memory follows the graph's arrays, not its XML tree. It
refuses what GraphML does not need or would be read wrong: a document type declaration or
entity (entity expansion is how a small XML file becomes a huge one; expat sees them in any
encoding), more than one graph, repeated node ids, coordinates declared as anything but
numbers, and more nodes or edges than the limits, as soon as the limit is passed.
"""

import io
import math
import re
from array import array
from collections.abc import Iterator
from typing import IO
from xml.etree.ElementTree import Element, ParseError

import numpy as np
from defusedxml import DefusedXmlException
from defusedxml.ElementTree import iterparse

from service.errors import RequestInvalid
from workers.spec import FieldError, Limits
from workers.spec.inputs import MAX_GRAPH_MAGNITUDE
from workers.spec.kinds.graphs import GraphArrays
from workers.spec.kinds.pixels import UPLOAD_POINTER

__all__ = ["GRAPHML_NAMESPACE", "decode_graph"]

GRAPHML_NAMESPACE = "http://graphml.graphdrawing.org/xmlns"
_YFILES_NAMESPACE = "http://www.yworks.com/xml/graphml"
_YFILES_NODES = ("GenericNode", "ShapeNode", "SVGNode", "ImageNode")  # as networkx reads them

_NUMERIC = {"int", "long", "float", "double"}
_TYPES = _NUMERIC | {"boolean", "string"}
_READ = ("x", "y", "z", "radius", "length")


def _refused(message: str) -> RequestInvalid:
    return RequestInvalid([FieldError(pointer=UPLOAD_POINTER, message=message)])


def _number(value: str | None, integral: bool, what: str) -> float:
    text = "" if value is None else value
    try:
        number = float(int(text)) if integral else float(text)
    except ValueError:
        kind = "an integer" if integral else "a number"
        raise _refused(f"{what} is {text[:40]!r}, not {kind}") from None
    if not math.isfinite(number):
        raise _refused(f"{what} is {number!r}; coordinates and lengths must be finite")
    return number


class _Key:
    """A GraphML ``key`` element: the attribute name and type its data elements carry."""

    def __init__(self, element: Element) -> None:
        key_id = element.get("id")
        name = element.get("attr.name")
        kind = element.get("attr.type", "string")
        if element.get("yfiles.type") is not None:  # yEd's graphics: read for the geometry
            name, kind = element.get("yfiles.type"), "yfiles"
        elif name is None:
            raise _refused(f"the GraphML key {key_id!r} has no attr.name")
        elif kind not in _TYPES:
            raise _refused(
                f"the GraphML key {key_id!r} declares attr.type {kind!r}; GraphML's types are "
                "boolean, int, long, float, double and string"
            )
        if name in _READ and kind not in _NUMERIC and element.get("for", "all") != "graph":
            raise _refused(
                f"the GraphML key {name!r} is declared as {kind!r}; x, y, z, radius and "
                "length must be int, long, float or double"
            )
        self.name = name
        self.integral = kind in ("int", "long")


class _Graph:
    """The nodes and edges read so far, as flat arrays, checked as they come."""

    def __init__(self, limits: Limits, directed: bool) -> None:
        self.limits = limits
        self.directed = directed
        self.names: list[str] = []
        self.position: dict[str, int] = {}
        self.dimension = 0  # 2 or 3, set by the first node
        self.coordinates = array("d")
        self.radius = array("d")  # NaN where a node has none
        self.edges = array("q")  # -1 for an end not declared yet: resolved at the end
        self.length = array("d")  # NaN where an edge has none
        self.later: list[tuple[int, str]] = []  # (index into edges, node id) of such ends

    def node(self, element: Element, data: "_Data") -> None:
        name = element.get("id")
        if name is None:
            raise _refused(f"node element {len(self.names)} has no id; GraphML nodes need one")
        if name in self.position:
            raise _refused(
                f"node id {name!r} appears twice in the GraphML file; GraphML needs distinct "
                "node ids, one per node"
            )
        if len(self.names) == self.limits.max_graph_nodes:
            raise _refused(
                f"the GraphML file has more than {self.limits.max_graph_nodes} nodes, the "
                "limit per graph"
            )
        if not self.names:
            self.dimension = 3 if "z" in data else 2
        axes = ("x", "y", "z")[: self.dimension]
        for axis in axes:
            if axis not in data:
                raise _refused(
                    f"node {name!r} has no {axis} attribute; GraphML nodes need x and y (and z "
                    f"for 3D) coordinates{' like the first node' if axis == 'z' else ''}"
                )
            self.coordinates.append(_number(*data[axis], f"{axis} of node {name!r}"))
        if self.dimension == 2 and "z" in data:
            raise _refused(
                f"node {name!r} has a z attribute but the first node has none; give "
                "every node the same coordinates"
            )
        radius = math.nan
        if "radius" in data:
            radius = _number(*data["radius"], f"radius of node {name!r}")
        self.radius.append(radius)
        self.position[name] = len(self.names)
        self.names.append(name)

    def edge(self, element: Element, data: "_Data") -> None:
        source, target = element.get("source"), element.get("target")
        if source is None or target is None:
            raise _refused(f"edge element {len(self.length)} needs a source and a target")
        ends = source, target
        directed = element.get("directed")
        if directed is not None and (directed == "true") != self.directed:
            kind = "directed" if self.directed else "undirected"
            raise _refused(
                f"edge {ends[0]!r}-{ends[1]!r} has directed={directed} in a {kind} graph "
                "(edgedefault); GraphML does not mix them"
            )
        if len(self.length) == self.limits.max_graph_edges:
            raise _refused(
                f"the GraphML file has more than {self.limits.max_graph_edges} edges, the "
                "limit per graph"
            )
        for end in ends:
            row = self.position.get(end, -1)
            if row < 0:
                self.later.append((len(self.edges), end))
            self.edges.append(row)
        length = math.nan
        if "length" in data:
            length = _number(*data["length"], f"length of edge {ends[0]!r}-{ends[1]!r}")
        self.length.append(length)

    def arrays(self) -> GraphArrays:
        if not self.names:
            raise _refused("the GraphML file has no nodes; a graph needs at least one")
        edges = np.frombuffer(self.edges, dtype=np.int64).reshape(-1, 2).copy()
        for index, name in self.later:
            if name not in self.position:
                u, v = edges[index // 2]
                pair = [self._name(u), self._name(v)]
                pair[index % 2] = name
                raise _refused(
                    f"edge {pair[0]!r}-{pair[1]!r} names node {name!r}, which has no node "
                    "element (and so no coordinates)"
                )
            edges.flat[index] = self.position[name]
        radius = np.frombuffer(self.radius, dtype=np.float64)
        length = np.frombuffer(self.length, dtype=np.float64)
        for values, what in ((radius, "node"), (length, "edge")):
            absent = np.isnan(values)
            if absent.all():
                continue
            if absent.any():
                first = int(np.argmax(absent))
                if what == "node":
                    culprit, attribute = f"node {self.names[first]!r}", "radius"
                else:
                    u, v = edges[first]
                    culprit, attribute = f"edge {self._name(u)!r}-{self._name(v)!r}", "length"
                raise _refused(
                    f"{culprit} has no {attribute} attribute; give it to every {what} or to none"
                )
            if ((values < 0) | (values > MAX_GRAPH_MAGNITUDE)).any():
                raise _refused(
                    f"radius and length attributes must be between 0 and {MAX_GRAPH_MAGNITUDE:g}"
                )
        return GraphArrays(
            coordinates=np.frombuffer(self.coordinates, dtype=np.float64)
            .reshape(-1, self.dimension)
            .copy(),
            edges=edges,
            radius=None if np.isnan(radius).all() else radius.copy(),
            length=None if len(length) == 0 or np.isnan(length).all() else length.copy(),
        )

    def _name(self, row: int) -> str:
        return self.names[row] if row >= 0 else "?"


_Data = dict[str, tuple[str | None, bool]]
"""What a node or edge gives to the attributes read: name -> (text, declared as integer)."""


def _data_of(element: Element, keys: dict[str, _Key], tags: "_Tags") -> _Data:
    """The attributes a node or edge element gives to what we read, later ones winning (as
    networkx reads them): text of numeric data elements, or yEd's node geometry."""
    data: _Data = {}
    for child in element:
        if child.tag != tags.data:
            continue
        key_id = child.get("key")
        key = keys.get(key_id or "")
        if key is None:
            raise _refused(
                f"a data element names key {key_id!r}, which no key element of the GraphML "
                "file declares"
            )
        if len(child):  # yEd's graphics: x and y from a node's Geometry
            for kind in _YFILES_NODES:
                found = child.find(f"{{{_YFILES_NAMESPACE}}}{kind}/{{{_YFILES_NAMESPACE}}}Geometry")
                if found is not None:
                    data["x"], data["y"] = (found.get("x"), False), (found.get("y"), False)
        elif key.name in _READ:
            data[key.name] = (child.text or "", key.integral)
    return data


class _Tags:
    """Qualified tag names of GraphML's elements in the file's namespace."""

    def __init__(self, namespace: str) -> None:
        prefix = f"{{{namespace}}}" if namespace else ""
        self.graphml, self.key, self.graph = prefix + "graphml", prefix + "key", prefix + "graph"
        self.node, self.edge, self.data = prefix + "node", prefix + "edge", prefix + "data"
        self.hyperedge = prefix + "hyperedge"


_DECLARED_ENCODING = re.compile(rb"""<\?xml[^>]*?\sencoding\s*=\s*["']([^"']{1,40})["']""")


def _events(stream: IO[bytes]) -> Iterator[tuple[str, Element]]:
    """defusedxml's iterparse with DTDs refused, its errors as refusals at /data."""
    start = stream.tell()
    try:
        yield from iterparse(stream, events=("start", "end"), forbid_dtd=True)
    except DefusedXmlException:
        raise _refused(
            "the GraphML file has a DOCTYPE or ENTITY declaration; GraphML needs none, and "
            "they are refused"
        ) from None
    except (ValueError, LookupError):
        # DefusedXmlException is a ValueError, so it goes first. expat reads no multi-byte but
        # UTF-8/16 (ValueError); a name Python has no codec for is a LookupError.
        stream.seek(start)
        declared = _DECLARED_ENCODING.match(stream.read(200))
        name = declared.group(1).decode("ascii", "replace") if declared else "declared"
        raise _refused(
            f"the GraphML file's encoding {name!r} is not supported; send it as UTF-8"
        ) from None
    except ParseError as error:
        text = re.sub(r"<[^<>]*>", "...", str(error))
        raise _refused(f"the file is not GraphML: not well-formed XML ({text})") from None


def decode_graph(source: IO[bytes] | bytes, limits: Limits) -> GraphArrays:
    """The graph in an uploaded GraphML file (a file object read from where it stands, or
    bytes), as arrays; RequestInvalid at ``/data`` for files that are too large, not GraphML,
    or lack coordinates."""
    stream: IO[bytes] = io.BytesIO(source) if isinstance(source, bytes) else source
    start = stream.tell()
    size = stream.seek(0, io.SEEK_END) - start
    stream.seek(start)
    if size > limits.max_body_bytes:
        raise _refused(
            f"the GraphML file has {size} bytes, above the limit of {limits.max_body_bytes} "
            "for a graph file"
        )
    keys: dict[str, _Key] = {}
    tags: _Tags | None = None
    root: Element | None = None
    graph: _Graph | None = None
    inside: Element | None = None  # the graph element while its children stream past
    graphs = 0
    depth = 0  # of the element an event is about, the root being 1
    for event, element in _events(stream):
        if event == "start":
            depth += 1
            if tags is None:
                namespace, _, local = element.tag.lstrip("{").rpartition("}")
                if local != "graphml" or namespace not in ("", GRAPHML_NAMESPACE):
                    raise _refused(
                        f"the file is not GraphML: its root element is {local!r}, not graphml "
                        f"in the namespace {GRAPHML_NAMESPACE}"
                    )
                tags, root = _Tags(namespace), element
            elif element.tag == tags.graph:
                graphs += 1
                if graphs > 1:
                    raise _refused(
                        f"the GraphML file has {graphs} graph elements or more; send one graph "
                        "per file"
                    )
                if depth == 2:
                    graph = _Graph(limits, element.get("edgedefault") == "directed")
                    inside = element
            elif element.tag == tags.hyperedge:
                raise _refused("the GraphML file has hyperedges; a graph of edges is read")
            continue
        depth -= 1
        assert tags is not None and root is not None  # an end follows its start
        if depth == 2 and inside is not None and graph is not None:  # a child of the graph
            if element.tag in (tags.node, tags.edge):
                data = _data_of(element, keys, tags)
                if element.tag == tags.node:
                    graph.node(element, data)
                else:
                    graph.edge(element, data)
            del inside[:]  # what is read is dropped: memory follows the arrays
        elif depth == 1:  # a child of the root
            if element.tag == tags.key:
                if graphs:
                    raise _refused(
                        "the GraphML file declares a key after its graph; GraphML's schema "
                        "puts every key before the graphs"
                    )
                keys[element.get("id") or ""] = _Key(element)
            inside = None
            del root[:]
    if graph is None:
        where = "" if graphs == 0 else " under its graphml element"
        raise _refused(f"the GraphML file has 0 graph elements{where}; send one graph per file")
    return graph.arrays()
