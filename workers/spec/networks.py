"""Network descriptors of graphs: what a request asks for and what a result carries."""

from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, Field

from workers.spec.filtrations import Center, Vector
from workers.spec.numbers import FiniteFloat

__all__ = [
    "DescriptorOptions",
    "GraphOutput",
    "NetworkDescriptors",
    "OutputKind",
    "ShellDescriptors",
    "Shells",
]

OutputKind = Literal["diagrams", "descriptors", "graph"]
"""What a job returns: its persistence diagrams (and feature vectors), the network descriptors
of a graph, or the graph itself (nodes and edges as the job used them)."""

MAX_SHELLS = 1000
"""Most concentric shells one request may ask descriptors for."""


class Shells(BaseModel):
    """Concentric shells around ``center``: ``count`` equal-width shells from 0 to
    ``max_radius`` (default: the farthest node), or explicit ``radii`` r0 < r1 < ... < rK
    for the K shells [r_i, r_{i+1}).

    An edge belongs to the shell holding its midpoint's distance from the center; a shell's
    graph is its edges, their end nodes, and the nodes without edges that lie in it."""

    model_config = ConfigDict(extra="forbid")

    center: Center
    count: Annotated[int | None, Field(strict=True, ge=1, le=MAX_SHELLS)] = None
    max_radius: Annotated[FiniteFloat | None, Field(gt=0)] = None
    radii: Annotated[
        list[Annotated[FiniteFloat, Field(ge=0)]] | None,
        Field(min_length=2, max_length=MAX_SHELLS + 1),
    ] = None


class DescriptorOptions(BaseModel):
    """How the network descriptors are measured."""

    model_config = ConfigDict(extra="forbid")

    direction: Annotated[
        Vector | None,
        Field(
            description="Direction of `extent` (penetration depth): the spread of the node "
            "projections on it. Default: none (`extent` null)."
        ),
    ] = None
    shells: Annotated[
        Shells | None, Field(description="Also give the descriptors per concentric shell.")
    ] = None
    radii: Annotated[
        list[Annotated[FiniteFloat, Field(gt=0)]] | None,
        Field(
            min_length=1,
            max_length=MAX_SHELLS,
            description="Labelled points only, and required there: the radii (coordinate "
            "units, strictly increasing) at which the fraction of each class's points with a "
            "point of another class within the radius is given.",
        ),
    ] = None


class NetworkDescriptors(BaseModel):
    """Standard morphometrics of a network, computed one fixed way. Lengths are in the result's
    units. Degrees count distinct neighbours; means of nothing are null."""

    node_count: int
    edge_count: int
    segment_count: Annotated[
        int,
        Field(
            description="Maximal paths whose inner nodes have degree 2 (a loop of degree-2 "
            "nodes is one closed segment)."
        ),
    ]
    tip_count: Annotated[int, Field(description="Nodes of degree 1.")]
    branch_point_count: Annotated[int, Field(description="Nodes of degree 3 or more.")]
    component_count: Annotated[int, Field(description="Connected components (Betti 0).")]
    cycle_count: Annotated[
        int, Field(description="Independent cycles (Betti 1): edges - nodes + components.")
    ]
    total_length: float
    mean_segment_length: float | None
    median_segment_length: float | None
    mean_tortuosity: Annotated[
        float | None,
        Field(
            description="Mean over open segments of path length / end-to-end distance "
            "(closed segments and segments whose ends coincide are left out)."
        ),
    ]
    extent: Annotated[
        float | None,
        Field(description="Spread of node positions along `descriptors.direction`."),
    ]
    mean_radius: Annotated[
        float | None,
        Field(
            description="Length-weighted mean radius of the edges (the mean of their end "
            "nodes' radii); null without radii."
        ),
    ]


class ShellDescriptors(BaseModel):
    """The descriptors of one concentric shell [inner_radius, outer_radius)."""

    inner_radius: float
    outer_radius: float
    descriptors: NetworkDescriptors


class GraphOutput(BaseModel):
    """The graph a job worked on, in the form a graph input takes (so it can be sent back):
    a mask's skeleton graph, or a given graph after dropping self-loops and repeated edges."""

    nodes: Annotated[list[list[float]], Field(description="Physical coordinates per node.")]
    edges: list[tuple[int, int]]
    radius: list[float] | None
    length: Annotated[list[float], Field(description="Length of each edge, in units.")]
