"""Graph jobs: the network a job works on, its filtration values and its descriptors.

The glue between ``workers.spec`` and ``workers.core`` for graphs: a graph input (stored as
rows, ``workers.spec.kinds.graphs.graph_rows``) or a mask's skeleton graph becomes one ``Network``
with clean edges and physical lengths; every filtration ends as one value per node and goes
through the same engine, ``workers.core.graph_persistence.graph_diagrams``.
"""

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from workers import defaults
from workers.core.errors import RequestError, pointing_into
from workers.core.graph_filtrations import (
    geodesic_distances,
    node_heights,
    node_radial_distances,
)
from workers.core.graph_persistence import graph_diagrams
from workers.core.network import (
    NetworkDescriptors as CoreDescriptors,
)
from workers.core.network import (
    clean_edges,
    edge_lengths,
    equal_shells,
    network_descriptors,
    shell_descriptors,
)
from workers.core.skeleton_graph import skeleton_graph
from workers.jobs.results import Computed, DiagramSet
from workers.jobs.steps import Steps, ignore, of_direction
from workers.spec import JobPayload, PersistenceTask
from workers.spec.filtrations import (
    AttributeFiltration,
    Filtration,
    GeodesicFiltration,
    HeightFiltration,
    RadialFiltration,
    unit_vector,
)
from workers.spec.jobs import GraphLayout
from workers.spec.kinds.graphs import graph_max_dim, graph_of_rows
from workers.spec.networks import (
    DescriptorOptions,
    GraphOutput,
    NetworkDescriptors,
    ShellDescriptors,
)
from workers.spec.problems import FieldError
from workers.spec.results import SKELETON_PACKAGES, ValueConvention

__all__ = [
    "Network",
    "descriptors_of",
    "filtration_step_count",
    "graph_diagram_sets",
    "graph_output",
    "network_of",
]


@dataclass(frozen=True)
class Network:
    """A graph ready to compute on: ``coordinates`` (n, d) physical, ``edges`` (m, 2) int64
    without self-loops or repeated pairs, ``lengths`` (m,), ``radius`` (n,) or None, and what
    was dropped from the input to get there."""

    coordinates: np.ndarray
    edges: np.ndarray
    lengths: np.ndarray
    radius: np.ndarray | None
    warnings: list[FieldError]


def _dropped(positions: np.ndarray, what: str, pointer: str | None) -> FieldError:
    shown = ", ".join(str(int(p)) for p in positions[:5]) + (", ..." if len(positions) > 5 else "")
    return FieldError(
        pointer=pointer or f"/input/edges/{int(positions[0])}",
        message=f"{len(positions)} {what} dropped (edge positions {shown})",
    )


def network_of(
    array: np.ndarray,
    *,
    layout: GraphLayout | None,
    skeletonize: bool,
    spacing: Sequence[float] | None,
) -> Network:
    """The network of a stored graph (``layout`` given) or of a mask to skeletonize."""
    if skeletonize:
        steps = list(spacing) if spacing is not None else [1.0] * array.ndim
        skeleton = skeleton_graph(array, steps)
        return Network(skeleton.coordinates, skeleton.edges, skeleton.lengths, skeleton.radius, [])
    if layout is None:
        raise TypeError("a graph job needs the layout of its stored rows")
    graph = graph_of_rows(array, layout)
    coordinates = graph.coordinates
    if spacing is not None:
        coordinates = coordinates * np.asarray(spacing, dtype=np.float64)
    cleanup = clean_edges(graph.edges)
    pointer = "/data" if layout.uploaded else None
    warnings = []
    if len(cleanup.self_loops):
        warnings.append(_dropped(cleanup.self_loops, "self-loops", pointer))
    if len(cleanup.duplicates):
        warnings.append(_dropped(cleanup.duplicates, "repeated edges", pointer))
    lengths = (
        graph.length[cleanup.kept]
        if graph.length is not None
        else edge_lengths(coordinates, cleanup.edges)
    )
    return Network(coordinates, cleanup.edges, lengths, graph.radius, warnings)


def graph_diagram_sets(
    network: Network, filtration: Filtration, progress: Steps | None = None
) -> tuple[list[DiagramSet], ValueConvention, int | None]:
    """The diagram sets of a graph filtration (one set, or one per direction of a height
    filtration with ``directions``), what their values are, and how many nodes a geodesic
    filtration never reaches (None for other filtrations); the node values and each
    persistence are steps of ``progress`` (``filtration_step_count`` of them)."""
    max_dim = graph_max_dim(filtration)
    progress = progress or Steps(ignore)

    def diagrams_of(values: np.ndarray, stage: str = "persistence") -> dict[int, np.ndarray]:
        progress.begin(stage)
        return dict(enumerate(graph_diagrams(values, network.edges, max_dim=max_dim)))

    if isinstance(filtration, HeightFiltration):
        units = filtration.unit_directions()
        count = len(units) if filtration.directions is not None else None
        sets = []
        for index, unit in enumerate(units):
            progress.begin(of_direction("heights", index, count))
            values = node_heights(network.coordinates, np.asarray(unit))
            diagrams = diagrams_of(values, of_direction("persistence", index, count))
            sets.append(DiagramSet(diagrams, unit if count is not None else None))
        return sets, "height", None
    if isinstance(filtration, RadialFiltration):
        progress.begin("radial distance")
        values = node_radial_distances(network.coordinates, np.asarray(filtration.center))
        return [DiagramSet(diagrams_of(values))], "radial_distance", None
    if isinstance(filtration, GeodesicFiltration):
        node_count = len(network.coordinates)
        for index, seed in enumerate(filtration.seeds):
            if seed >= node_count:  # a skeleton graph's nodes are known only now
                has = f"nodes 0 to {node_count - 1}" if node_count else "no nodes"
                raise RequestError(
                    f"seed {seed} is not a node; the graph has {has}",
                    field=f"/filtration/seeds/{index}",
                )
        progress.begin("geodesic distance")
        values = geodesic_distances(
            node_count, network.edges, network.lengths, np.asarray(filtration.seeds)
        )
        unreached = int(np.isinf(values).sum())
        return [DiagramSet(diagrams_of(values))], "geodesic_distance", unreached
    if isinstance(filtration, AttributeFiltration):
        values = np.asarray(filtration.values, dtype=np.float64)
        return [DiagramSet(diagrams_of(values))], "node_value", None
    raise TypeError(f"not a graph filtration: {type(filtration).__name__}")


def filtration_step_count(filtration: Filtration | None) -> int:
    """Steps of ``graph_diagram_sets``: the node values (unless given) and the persistence,
    for each direction."""
    if filtration is None:
        return 0
    if isinstance(filtration, HeightFiltration):
        return 2 * len(filtration.unit_directions())
    return 1 if isinstance(filtration, AttributeFiltration) else 2


def _model(descriptors: CoreDescriptors) -> NetworkDescriptors:
    return NetworkDescriptors.model_validate(descriptors.as_dict())


def descriptors_of(
    network: Network, options: DescriptorOptions | None
) -> tuple[NetworkDescriptors, list[ShellDescriptors] | None]:
    """The network descriptors of the whole graph, and per shell when the options ask."""
    direction = None
    if options is not None and options.direction is not None:
        direction = np.asarray(unit_vector(options.direction))
    with pointing_into("/descriptors"):
        whole = network_descriptors(
            network.coordinates,
            network.edges,
            network.lengths,
            direction=direction,
            radius=network.radius,
        )
    if options is None or options.shells is None:
        return _model(whole), None
    shells = options.shells
    center = np.asarray(shells.center, dtype=np.float64)
    if shells.radii is not None:
        boundaries = np.asarray(shells.radii, dtype=np.float64)
    else:
        with pointing_into("/descriptors/shells"):
            boundaries = equal_shells(
                network.coordinates, center, shells.count or 1, shells.max_radius
            )
    renames = {"/direction": "/descriptors/direction", "/boundaries": "/descriptors/shells/radii"}
    with pointing_into("/descriptors/shells", renames):
        per_shell = shell_descriptors(
            network.coordinates,
            network.edges,
            network.lengths,
            center=center,
            boundaries=boundaries,
            direction=direction,
            radius=network.radius,
        )
    return _model(whole), [
        ShellDescriptors(
            inner_radius=float(boundaries[index]),
            outer_radius=float(boundaries[index + 1]),
            descriptors=_model(descriptors),
        )
        for index, descriptors in enumerate(per_shell)
    ]


def graph_output(network: Network) -> GraphOutput:
    """The network as a result shows it (the form of a graph input)."""
    return GraphOutput(
        nodes=network.coordinates.tolist(),
        edges=[(int(u), int(v)) for u, v in network.edges.tolist()],
        radius=None if network.radius is None else network.radius.tolist(),
        length=network.lengths.tolist(),
    )


def compute(
    payload: JobPayload, task: PersistenceTask, array: np.ndarray, steps: Steps
) -> Computed:
    """Diagrams of the graph filtration (one set per direction, or none without a
    filtration), and the network descriptors and graph when the output asks for them."""
    described = "descriptors" in task.output
    steps.plan(1 + filtration_step_count(task.filtration) + described)
    steps.begin("skeleton graph" if task.skeletonize else "network")
    network = network_of(
        array, layout=task.graph, skeletonize=task.skeletonize, spacing=task.spacing
    )
    sets: list[DiagramSet] = []
    convention: ValueConvention | None = None
    unreached = None
    if task.filtration is not None:
        with pointing_into("/filtration"):
            sets, convention, unreached = graph_diagram_sets(network, task.filtration, steps)
    descriptors, shells = None, None
    if described:
        steps.begin("descriptors")
        descriptors, shells = descriptors_of(network, task.descriptors)
    coordinate_units = payload.input.units
    if task.skeletonize and task.spacing is None:
        coordinate_units = "pixel"
    return Computed(
        sets=sets,
        convention=convention,
        coordinate_units=coordinate_units,
        engine="graph-lacuna-c" if task.filtration is not None else None,
        spacing=task.spacing,
        packages=SKELETON_PACKAGES if task.skeletonize else (),
        limit_pointer="/filtration",
        advice="lower max_dim",
        diagrams_kept="diagrams" in task.output,
        fields={
            "descriptors": descriptors,
            "shells": shells,
            "graph": graph_output(network) if "graph" in task.output else None,
            "unreached_nodes": unreached,
            "warnings": network.warnings,
        },
    )


def runs_inline(payload: JobPayload) -> bool:
    if payload.input.type != "graph":  # a mask to skeletonize
        return math.prod(payload.input.shape) <= defaults.INLINE_MAX_PIXELS
    return payload.input.shape[0] <= defaults.INLINE_MAX_GRAPH_ROWS
