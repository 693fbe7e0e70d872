"""Graph inputs as arrays: built from JSON or GraphML, checked, and packed for the queue.

The same checks run on a graph from JSON ``nodes``/``edges`` and on one uploaded as GraphML,
so the same graph gets the same answer either way; only the pointer differs (``/input/...``
for JSON, ``/data`` for the uploaded part).
"""

import math

import numpy as np
from pydantic import BaseModel

from workers.spec.capabilities import Limits
from workers.spec.filtrations import (
    GRAPH_FILTRATIONS,
    AttributeFiltration,
    Filtration,
    GeodesicFiltration,
    HeightFiltration,
    RadialFiltration,
    direction_errors,
)
from workers.spec.inputs import MAX_GRAPH_MAGNITUDE, GraphInput
from workers.spec.jobs import GraphLayout, PersistenceTask
from workers.spec.kinds.base import Checked, GraphArrays, InputData, InputKind, Stored
from workers.spec.kinds.points import ragged_row
from workers.spec.networks import DescriptorOptions
from workers.spec.problems import FieldError
from workers.spec.requests import JobRequest

__all__ = [
    "GraphArrays",
    "GraphKind",
    "graph_arrays",
    "graph_errors",
    "graph_filtration_errors",
    "graph_max_dim",
    "graph_of_rows",
    "graph_rows",
    "layout_of",
]


def graph_arrays(graph_input: GraphInput) -> GraphArrays | FieldError:
    """The JSON nodes and edges of ``graph_input`` as arrays, or a
    FieldError at the first node row whose length differs from the first row's."""
    nodes = graph_input.nodes or []
    if not nodes:
        return FieldError(
            pointer="/input/nodes",
            message="the graph has no nodes; give at least one (or upload GraphML as the data "
            "part of a multipart request)",
        )
    ragged = ragged_row("/input/nodes", nodes, "node")
    if ragged is not None:
        return ragged
    coordinates = np.asarray(nodes, dtype=np.float64)
    edges = np.asarray(graph_input.edges or [], dtype=np.int64).reshape(-1, 2)
    return GraphArrays(
        coordinates=coordinates,
        edges=edges,
        radius=None if graph_input.radius is None else np.asarray(graph_input.radius, float),
        length=None if graph_input.length is None else np.asarray(graph_input.length, float),
    )


def _pointer(uploaded: bool, json_pointer: str) -> str:
    return "/data" if uploaded else json_pointer


def graph_errors(
    graph: GraphArrays,
    graph_input: GraphInput,
    filtration: Filtration | None,
    options: DescriptorOptions | None,
    limits: Limits,
    uploaded: bool,
) -> list[FieldError]:
    """What is wrong with a graph, and with the filtration and descriptors asked of it."""
    n, m = len(graph.coordinates), len(graph.edges)
    dims = graph.coordinates.shape[1] if graph.coordinates.ndim == 2 else 0
    if n == 0:
        return [
            FieldError(
                pointer=_pointer(uploaded, "/input/nodes"),
                message="the graph has no nodes; a graph needs at least one",
            )
        ]
    errors: list[FieldError] = []
    if n > limits.max_graph_nodes:
        errors.append(
            FieldError(
                pointer=_pointer(uploaded, "/input/nodes"),
                message=f"{n} nodes is above the limit of {limits.max_graph_nodes} per graph",
            )
        )
    if m > limits.max_graph_edges:
        errors.append(
            FieldError(
                pointer=_pointer(uploaded, "/input/edges"),
                message=f"{m} edges is above the limit of {limits.max_graph_edges} per graph",
            )
        )
    if errors:
        return errors
    scaled = graph.coordinates
    if graph_input.spacing is not None and len(graph_input.spacing) != dims:
        errors.append(
            FieldError(
                pointer="/input/spacing",
                message=f"spacing has "
                f"{len(graph_input.spacing)} numbers for {dims}D nodes; give one per axis",
            )
        )
    elif graph_input.spacing is not None:
        scaled = graph.coordinates * np.asarray(graph_input.spacing)
    large = np.abs(scaled) > MAX_GRAPH_MAGNITUDE
    if large.any():
        row = int(np.argmax(large.any(axis=1)))
        errors.append(
            FieldError(
                pointer=_pointer(uploaded, f"/input/nodes/{row}"),
                message=f"node {row} has a coordinate (after spacing) beyond "
                f"{MAX_GRAPH_MAGNITUDE:g}; lengths along the network must stay finite",
            )
        )
    outside = (graph.edges < 0) | (graph.edges >= n)
    if outside.any():
        row, end = (int(i) for i in np.unravel_index(int(np.argmax(outside)), outside.shape))
        errors.append(
            FieldError(
                pointer=_pointer(uploaded, f"/input/edges/{row}/{end}"),
                message=f"edge {row} names node {int(graph.edges[row, end])}, but the nodes are "
                f"numbered 0 to {n - 1}",
            )
        )
    for name, values, count, what in (
        ("radius", graph.radius, n, "node"),
        ("length", graph.length, m, "edge"),
    ):
        if values is not None and len(values) != count:
            errors.append(
                FieldError(
                    pointer=_pointer(uploaded, f"/input/{name}"),
                    message=f"{name} has {len(values)} values for {count} {what}s; give one per "
                    f"{what}",
                )
            )
    return errors + graph_filtration_errors(filtration, dims, n, options, limits)


def graph_filtration_errors(
    filtration: Filtration | None,
    dims: int,
    node_count: int | None,
    options: DescriptorOptions | None,
    limits: Limits,
) -> list[FieldError]:
    """What is wrong with the filtration and descriptor options asked of a ``dims``-D graph
    (``node_count`` None: a skeleton graph, whose nodes are known only when it is built)."""
    errors: list[FieldError] = []
    if options is not None:
        errors.extend(_option_errors(options, dims))
    if filtration is None:
        return errors
    if filtration.type not in GRAPH_FILTRATIONS:
        return errors + [
            FieldError(
                pointer="/filtration/type",
                message='a graph takes a "height", "radial", "geodesic" or "attribute" '
                f'filtration, not "{filtration.type}"',
            )
        ]
    max_dim = filtration.max_dim
    if max_dim is not None and max_dim > min(1, limits.max_dim):
        errors.append(
            FieldError(
                pointer="/filtration/max_dim",
                message=f"max_dim {max_dim} is above {min(1, limits.max_dim)}, the highest "
                "dimension of a graph" + (" on this server" if limits.max_dim < 1 else ""),
            )
        )
    if isinstance(filtration, HeightFiltration):
        errors.extend(direction_errors(filtration, dims, f"{dims}D nodes"))
    if isinstance(filtration, RadialFiltration) and len(filtration.center) != dims:
        errors.append(
            FieldError(
                pointer="/filtration/center",
                message=f"center has {len(filtration.center)} coordinates for {dims}D nodes",
            )
        )
    if isinstance(filtration, GeodesicFiltration) and node_count is not None:
        for index, seed in enumerate(filtration.seeds):
            if seed >= node_count:
                errors.append(
                    FieldError(
                        pointer=f"/filtration/seeds/{index}",
                        message=f"seed {seed} is not a node; the nodes are numbered 0 to "
                        f"{node_count - 1}",
                    )
                )
                break
    if isinstance(filtration, AttributeFiltration):
        if node_count is None:
            errors.append(
                FieldError(
                    pointer="/filtration/type",
                    message="the nodes of a skeleton graph are not known before it is built, so "
                    "they cannot carry given values; use height, radial or geodesic",
                )
            )
        elif len(filtration.values) != node_count:
            errors.append(
                FieldError(
                    pointer="/filtration/values",
                    message=f"values has {len(filtration.values)} numbers for {node_count} nodes; "
                    "give one per node",
                )
            )
    return errors


def graph_max_dim(filtration: Filtration) -> int:
    """The highest homology dimension a filtration on a graph computes (default 1)."""
    return 1 if filtration.max_dim is None else filtration.max_dim


def _option_errors(options: DescriptorOptions, dims: int) -> list[FieldError]:
    errors = []
    if options.radii is not None:
        errors.append(
            FieldError(
                pointer="/descriptors/radii",
                message="radii are for labelled points; a graph's descriptors take direction "
                "and shells",
            )
        )
    if options.direction is not None:
        if len(options.direction) != dims:
            errors.append(
                FieldError(
                    pointer="/descriptors/direction",
                    message=f"the direction has {len(options.direction)} numbers for {dims}D nodes",
                )
            )
        elif math.hypot(*options.direction) == 0:
            errors.append(
                FieldError(
                    pointer="/descriptors/direction",
                    message="the direction has length 0; give a non-zero vector",
                )
            )
    shells = options.shells
    if shells is None:
        return errors
    if len(shells.center) != dims:
        errors.append(
            FieldError(
                pointer="/descriptors/shells/center",
                message=f"center has {len(shells.center)} coordinates for {dims}D nodes",
            )
        )
    if (shells.count is None) == (shells.radii is None):
        errors.append(
            FieldError(
                pointer="/descriptors/shells",
                message='give either "count" '
                '(equal-width shells) or "radii" (their boundaries), exactly one',
            )
        )
    elif shells.radii is not None:
        if shells.max_radius is not None:
            errors.append(
                FieldError(
                    pointer="/descriptors/shells/max_radius",
                    message="max_radius goes with count; radii already end the last shell",
                )
            )
        for index in range(1, len(shells.radii)):
            if shells.radii[index] <= shells.radii[index - 1]:
                errors.append(
                    FieldError(
                        pointer=f"/descriptors/shells/radii/{index}",
                        message="radii must increase: each boundary above the one before",
                    )
                )
                break
    return errors


def graph_rows(graph: GraphArrays) -> np.ndarray:
    """One float64 array holding a whole graph, the form it is stored in for the worker.

    Width d + 1. The first n rows are the nodes: coordinates, then radius (0 without radii);
    the next m rows the edges: the two node positions (exact in float64 below 2**53), the
    length (0 without lengths), zero padding in 3D."""
    n, dims = graph.coordinates.shape
    m = len(graph.edges)
    rows = np.zeros((n + m, dims + 1), dtype=np.float64)
    rows[:n, :dims] = graph.coordinates
    if graph.radius is not None:
        rows[:n, dims] = graph.radius
    rows[n:, :2] = graph.edges
    if graph.length is not None:
        rows[n:, 2] = graph.length
    return rows


def layout_of(graph: GraphArrays, *, uploaded: bool) -> GraphLayout:
    """The layout ``graph_rows`` packs ``graph`` with."""
    return GraphLayout(
        node_count=len(graph.coordinates),
        dims=graph.coordinates.shape[1],
        has_radius=graph.radius is not None,
        has_length=graph.length is not None,
        uploaded=uploaded,
    )


def graph_of_rows(rows: np.ndarray, layout: GraphLayout) -> GraphArrays:
    """The graph that ``graph_rows`` packed."""
    n, dims = layout.node_count, layout.dims
    return GraphArrays(
        coordinates=rows[:n, :dims].copy(),
        edges=rows[n:, :2].astype(np.int64),
        radius=rows[:n, dims].copy() if layout.has_radius else None,
        length=rows[n:, 2].copy() if layout.has_length else None,
    )


class GraphKind(InputKind[GraphInput]):
    """Vessel and fibre networks: JSON nodes and edges or an uploaded GraphML file, stored as
    ``graph_rows`` with the ``GraphLayout`` that splits them in the task."""

    type = "graph"
    model = GraphInput
    data_fields = ("nodes", "edges", "radius", "length")  # the same for JSON and GraphML
    upload = "graphml"

    def on_graph(self, given: BaseModel) -> bool:
        return True

    def data(self, given: BaseModel) -> InputData | FieldError | None:
        if isinstance(given, GraphInput) and given.nodes is not None:
            return graph_arrays(given)
        return None

    def check(
        self, request: JobRequest, data: InputData | None, uploaded: bool, limits: Limits
    ) -> Checked:
        given = self.given(request)
        if uploaded and given.nodes is not None:
            return Checked.stop(
                "/input/nodes",
                "the graph is both in nodes and uploaded as the data part; send it one way",
            )
        if not isinstance(data, GraphArrays):
            return Checked.stop(
                "/input/nodes",
                "give the graph as nodes and edges, or upload GraphML as the data part of a "
                "multipart/form-data request",
            )
        if uploaded:
            for name in ("edges", "radius", "length"):
                if getattr(given, name) is not None:
                    return Checked.stop(
                        f"/input/{name}",
                        f"an uploaded graph carries its own {name}; leave it out of the "
                        "request part",
                    )
        filtration = request.filtration
        errors = graph_errors(data, given, filtration, request.descriptors, limits, uploaded)
        if errors:
            return Checked(errors, None)
        return Checked([], set(range(graph_max_dim(filtration) + 1)) if filtration else set())

    def stored(self, request: JobRequest, data: InputData | None, uploaded: bool) -> Stored:
        if not isinstance(data, GraphArrays):
            raise TypeError("a graph job needs its checked arrays")
        name = request.filtration_name()
        return Stored(
            graph_rows(data),
            "graph",
            {"graph": layout_of(data, uploaded=uploaded), "spacing": self.given(request).spacing},
            f"{name} on a graph of {len(data.coordinates)} nodes and {len(data.edges)} edges",
        )

    def worker(self, task: PersistenceTask) -> str:
        return "workers.jobs.graphs"
