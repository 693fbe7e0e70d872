"""How a job builds its filtration."""

import math
from typing import Annotated, Any, Literal

from pydantic import BaseModel, ConfigDict, Discriminator, Field, Tag

from workers.spec.numbers import Coordinate, FiniteFloat
from workers.spec.problems import FieldError

MAX_NODE_VALUE = 1e100
"""Largest absolute value of an attribute filtration: the bound of diagram values."""

NodeIndex = Annotated[
    int, Field(strict=True, ge=0, lt=2**31, description="Position of a node (0-based).")
]
"""Below 2**31: no graph holds more nodes (max_graph_nodes), and every index fits int64 and a
float64 row exactly."""


class Subsample(BaseModel):
    """Reduce the point set before building the filtration.

    ``maxmin`` is greedy furthest-point sampling started from a seeded random point;
    ``random`` draws ``size`` distinct points uniformly. Both are reproducible from ``seed``.
    """

    model_config = ConfigDict(extra="forbid")

    method: Literal["maxmin", "random"]
    size: Annotated[int, Field(strict=True, ge=1, description="Number of points kept (K <= N).")]
    seed: Annotated[int, Field(strict=True, ge=0, le=2**63 - 1)] = 0


Population = Annotated[
    str | None,
    Field(
        min_length=1,
        max_length=64,
        description="Labelled points only: compute on the points of this class alone. "
        "Default: every point, whatever its class.",
    ),
]
"""The class a point filtration of labelled points is restricted to (one field, so every
point filtration takes it the same way)."""


class RipsFiltration(BaseModel):
    """Vietoris-Rips filtration; values are edge lengths (diameters), not ball radii."""

    model_config = ConfigDict(extra="forbid")

    type: Literal["rips"]
    max_dim: Annotated[
        int, Field(strict=True, ge=0, le=2, description="Highest homology dimension (0..2).")
    ] = 1
    max_edge: Annotated[
        FiniteFloat | None,
        Field(ge=0, description="Stop at this edge length; classes alive there get death null."),
    ] = None
    subsample: Subsample | None = None
    population: Population = None


ClassName = Annotated[str, Field(min_length=1, max_length=64)]
"""A class of labelled points, as named in the labels."""


class DowkerFiltration(BaseModel):
    """Dowker (witness) filtration of two classes of labelled points: a set of ``vertices``
    points is a simplex at the least radius r such that one ``witnesses`` point lies within r
    of every one of them (value convention ``witness_radius``). By Dowker duality the roles
    may be swapped without changing the diagrams; ``side`` says which class is built on
    (``smaller``: the one with fewer candidate simplices)."""

    model_config = ConfigDict(extra="forbid")

    type: Literal["dowker"]
    vertices: Annotated[ClassName, Field(description="The class whose points are vertices.")]
    witnesses: Annotated[ClassName, Field(description="The class whose points witness.")]
    max_dim: Annotated[
        int, Field(strict=True, ge=0, le=2, description="Highest homology dimension (0..2).")
    ] = 1
    max_radius: Annotated[
        FiniteFloat,
        Field(
            gt=0,
            description="Stop at this radius (coordinate units); a witness farther from a "
            "vertex never sees it, and classes alive there get death null.",
        ),
    ]
    side: Annotated[
        Literal["vertices", "witnesses", "smaller"],
        Field(
            description='Which class is built on: "vertices" as given, "witnesses" the '
            'roles swapped, "smaller" the side with fewer candidate simplices.'
        ),
    ] = "smaller"


ArrayMaxDim = Annotated[
    int | None,
    Field(
        strict=True,
        ge=0,
        le=2,
        description="Highest homology dimension, at most d - 1 for a d-dimensional array. "
        "Default: d - 1 (H0 and H1 in 2D; H0, H1 and H2 in 3D).",
    ),
]

Vector = Annotated[
    list[Coordinate],
    Field(
        min_length=2,
        max_length=3,
        description="One number per array axis, in array-axis order (the order of `spacing`).",
    ),
]


class CubicalFiltration(BaseModel):
    """Sublevel or superlevel sets of an image's values on its cubical complex.

    Pixels (voxels) are the top-dimensional cells; an edge, vertex or face enters with the
    first pixel that contains it. ``superlevel`` is the sublevel filtration of the negated
    values, and diagrams are reported on that negated axis, so births stay below deaths.
    """

    model_config = ConfigDict(extra="forbid")

    type: Literal["cubical"]
    direction: Literal["sublevel", "superlevel"] = "sublevel"
    max_dim: ArrayMaxDim = None


class DistanceFiltration(BaseModel):
    """A mask grown outward: the signed Euclidean distance of each pixel centre to the other
    side of the mask boundary, negative inside and positive outside, in units of spacing.

    The complex at value 0 is the mask itself; below 0 it is the mask eroded, above 0 the mask
    dilated (flooding outward until the holes fill)."""

    model_config = ConfigDict(extra="forbid")

    type: Literal["distance"]
    max_dim: ArrayMaxDim = None


def unit_vector(vector: list[float]) -> list[float]:
    """``vector`` (non-zero) scaled to length 1."""
    largest = max(abs(v) for v in vector)  # first to about 1: subnormals scale exactly
    scaled = [v / largest for v in vector]
    norm = math.hypot(*scaled)
    return [v / norm for v in scaled]


MAX_DIRECTIONS = 256
"""Most directions one height filtration sweeps."""


def _directions_kind(value: Any) -> str:
    """Which form ``directions`` takes: a count (an integer) or a list of vectors (anything
    else, so that its error says what a list needs)."""
    return "count" if isinstance(value, int) else "vectors"


Directions = Annotated[
    Annotated[list[Vector], Field(min_length=1, max_length=MAX_DIRECTIONS), Tag("vectors")]
    | Annotated[int, Field(strict=True, ge=1, le=MAX_DIRECTIONS), Tag("count")],
    Discriminator(_directions_kind),
]
"""A list of direction vectors, or (2D) a count of evenly spaced directions. Told apart
before validation, so an error names the field itself, not one guess per form."""


_ONE_DIRECTION_FORM: dict[str, Any] = {
    "oneOf": [
        {"required": ["direction"], "properties": {"direction": {"type": "array"}}},
        {"required": ["directions"], "properties": {"directions": {"type": ["array", "integer"]}}},
    ]
}
"""The OpenAPI document's statement of the rule ``direction_errors`` checks first: exactly one
of ``direction`` and ``directions``."""


class HeightFiltration(BaseModel):
    """A sweep by a line (2D) or plane (3D): foreground pixels, or graph nodes, enter at the
    projection of their centre on a unit direction (a graph edge with its later end). Give one
    ``direction``, or several ``directions`` for one diagram set per direction (in request
    order): a list of vectors, or in 2D a count K for K evenly spaced directions at angles
    2 pi k / K, k = 0..K-1, from the first axis toward the second. Vectors need not be unit:
    they are scaled to length 1, and results echo the unit vectors used."""

    model_config = ConfigDict(extra="forbid", json_schema_extra=_ONE_DIRECTION_FORM)

    type: Literal["height"]
    direction: Vector | None = None
    directions: Directions | None = None
    max_dim: ArrayMaxDim = None

    def unit_directions(self) -> list[list[float]]:
        """The direction vectors scaled to length 1, in request order."""
        if isinstance(self.directions, int):
            angles = [2 * math.pi * k / self.directions for k in range(self.directions)]
            return [[math.cos(angle), math.sin(angle)] for angle in angles]
        vectors = [self.direction] if self.direction is not None else self.directions or []
        return [unit_vector(vector) for vector in vectors]

    def direction_count(self) -> int:
        """How many diagram sets the sweep makes."""
        return len(self.unit_directions()) if self.directions is not None else 1


MAX_CENTER = 1e90
"""Largest absolute centre coordinate: distances from it stay within the bound of diagram
values."""

Center = Annotated[
    list[Annotated[FiniteFloat, Field(ge=-MAX_CENTER, le=MAX_CENTER)]],
    Field(min_length=2, max_length=3, description="Physical coordinates in array-axis order."),
]


class RadialFiltration(BaseModel):
    """Shells around a centre: foreground pixels enter at the Euclidean distance of their
    centre from ``center`` (physical coordinates in array-axis order; pixel (0, 0) is at the
    origin). The centre may lie outside the array."""

    model_config = ConfigDict(extra="forbid")

    type: Literal["radial"]
    center: Center
    max_dim: ArrayMaxDim = None


GraphMaxDim = Annotated[
    int | None,
    Field(
        strict=True,
        ge=0,
        le=1,
        description="Highest homology dimension, 0 or 1 (a graph "
        "has no higher classes). Default: 1.",
    ),
]


class GeodesicFiltration(BaseModel):
    """Growth along the network: nodes enter at their shortest-path distance from the nearest
    of the ``seeds`` (node positions), summing edge lengths, so the network fills outward along
    its vessels. Nodes no path reaches never enter: they and their edges are in no diagram, and
    the result counts them in ``unreached_nodes``."""

    model_config = ConfigDict(extra="forbid")

    type: Literal["geodesic"]
    seeds: Annotated[list[NodeIndex], Field(min_length=1, max_length=100_000)]
    max_dim: GraphMaxDim = None


class AttributeFiltration(BaseModel):
    """Sublevel sets of a value given per node (a measured intensity, a radius, a flow): node
    i enters at ``values[i]``, an edge with its later end."""

    model_config = ConfigDict(extra="forbid")

    type: Literal["attribute"]
    values: Annotated[
        list[Annotated[FiniteFloat, Field(ge=-MAX_NODE_VALUE, le=MAX_NODE_VALUE)]],
        Field(min_length=1, description="One value per node, in node order."),
    ]
    max_dim: GraphMaxDim = None


GRAPH_FILTRATIONS = ("height", "radial", "geodesic", "attribute")
"""Filtrations of a graph (and of a mask's skeleton graph)."""

ArrayFiltration = CubicalFiltration | DistanceFiltration | HeightFiltration | RadialFiltration
"""Filtrations built on a pixel or voxel array."""

MASK_FILTRATIONS = ("distance", "height", "radial")
"""Filtrations whose values come from a mask's geometry."""

Filtration = Annotated[
    RipsFiltration
    | DowkerFiltration
    | CubicalFiltration
    | DistanceFiltration
    | HeightFiltration
    | RadialFiltration
    | GeodesicFiltration
    | AttributeFiltration,
    Field(discriminator="type"),
]
"""Every filtration type, told apart by ``type``."""


def direction_errors(filtration: HeightFiltration, ndim: int, what: str) -> list[FieldError]:
    """What is wrong with the direction(s) of a height filtration on ``what`` (``ndim``-D)."""
    if (filtration.direction is None) == (filtration.directions is None):
        return [
            FieldError(
                pointer="/filtration/direction",
                message='give either "direction" (one vector) or "directions" (a list), '
                "exactly one of them",
            )
        ]
    if isinstance(filtration.directions, int):
        if ndim != 2:
            return [
                FieldError(
                    pointer="/filtration/directions",
                    message=f"a count of evenly spaced directions needs 2D data; for {what} "
                    "give the direction vectors",
                )
            ]
        return []
    if filtration.direction is not None:
        named = [("/filtration/direction", filtration.direction)]
    else:
        named = [
            (f"/filtration/directions/{i}", vector)
            for i, vector in enumerate(filtration.directions or [])
        ]
    errors = []
    for pointer, vector in named:
        if len(vector) != ndim:
            errors.append(
                FieldError(
                    pointer=pointer,
                    message=f"the direction has {len(vector)} numbers for {what}",
                )
            )
        elif math.hypot(*vector) == 0:
            errors.append(
                FieldError(
                    pointer=pointer,
                    message="the direction has length 0; give a non-zero vector",
                )
            )
    return errors
