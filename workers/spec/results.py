"""What a finished job returns."""

from functools import cache
from importlib.metadata import version
from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, Field

from workers.spec.networks import GraphOutput, NetworkDescriptors, ShellDescriptors
from workers.spec.numbers import Coordinate
from workers.spec.problems import FieldError

PROVENANCE_PACKAGES = ("lacuna", "numpy", "scipy", "gudhi")
"""Packages whose versions shape a result; every provenance records them."""


@cache  # reading package metadata costs ~5 ms, and a process never changes its packages
def _installed_versions() -> tuple[tuple[str, str], ...]:
    versions = {name: version(name) for name in PROVENANCE_PACKAGES}
    versions["ripser"] = f"gudhi-{versions['gudhi']}"
    return tuple(versions.items())


def package_versions() -> dict[str, str]:
    """Versions recorded in provenance and capabilities.

    ``ripser`` names the Ripser build that reduced the filtration: the float64 one inside
    gudhi, so its value is ``gudhi-<version>``.
    """
    return dict(_installed_versions())


Pair = tuple[Coordinate, Coordinate | None]
"""(birth, death); death null means the class never dies within the filtration."""

MAX_DIAGRAM_DIM = 7
"""Highest homology dimension a diagram can carry."""

Dimension = Annotated[
    int, Field(strict=True, ge=0, le=MAX_DIAGRAM_DIM, description="Homology dimension k.")
]


class Diagram(BaseModel):
    """Persistence diagram of one homology dimension."""

    model_config = ConfigDict(extra="forbid")

    dim: Dimension
    pairs: Annotated[
        list[Pair],
        Field(
            description="[birth, death] pairs, death >= birth or null. In results: sorted by "
            "(birth, death), null deaths last, no zero-length pairs."
        ),
    ]


DirectionIndex = Annotated[
    int | None,
    Field(
        description="Position of the direction in the request's `directions` (null "
        "without directions)."
    ),
]


def pair_errors(pairs: list[tuple[float, float | None]], where: str) -> list[FieldError]:
    """A FieldError for each pair whose death is below its birth (at most 10)."""
    errors = []
    for row, (birth, death) in enumerate(pairs):
        if death is not None and death < birth:
            errors.append(
                FieldError(
                    pointer=f"{where}/{row}/1",
                    message=f"death {death:g} is below birth {birth:g}",
                )
            )
            if len(errors) == 10:
                break
    return errors


class FeatureVector(BaseModel):
    """The values of one feature spec on one diagram."""

    type: str
    dim: int
    spec_id: str
    direction: DirectionIndex = None
    shape: list[int]
    values: Annotated[list[float], Field(description="Flattened row-major (C order).")]
    labels: Annotated[
        list[str] | None, Field(description="Name of each value (summary features).")
    ] = None


class LayoutEntry(BaseModel):
    """Where one feature's values sit in the concatenated vector: [start, stop)."""

    type: str
    dim: int
    spec_id: str
    direction: DirectionIndex = None
    start: int
    stop: int


class Provenance(BaseModel):
    """Everything needed to tell whether two results came from the same computation."""

    input_sha256: Annotated[
        str,
        Field(
            description="SHA-256 of the input array: the ASCII shape as 'n,d;' followed by the "
            "values as little-endian float64 in row-major order."
        ),
    ]
    request_sha256: Annotated[
        str,
        Field(
            description='SHA-256 of the canonical JSON (RFC 8785) of {"request": the request '
            'with its input array set to null, "input_sha256": input_sha256}; features named '
            "by spec_id count as the specs they name."
        ),
    ]
    versions: dict[str, str]
    elapsed_s: Annotated[float, Field(description="Wall time of the computation itself.")]
    request_id: Annotated[
        str | None,
        Field(description="X-Request-Id of the request that queued the job, for its logs."),
    ] = None
    subsample_indices: Annotated[
        list[int] | None, Field(description="Rows of the input kept by subsample, in order.")
    ] = None
    subsample_covering_radius: Annotated[
        float | None,
        Field(description="Hausdorff distance from the subsample to the full point set."),
    ] = None


ValueConvention = Literal[
    "edge_length",
    "pixel_value",
    "negated_pixel_value",
    "signed_distance",
    "height",
    "radial_distance",
    "geodesic_distance",
    "node_value",
]
"""What the numbers of a diagram are."""


class DirectionDiagrams(BaseModel):
    """The diagrams of one direction of a height filtration with several directions."""

    direction: Annotated[list[float], Field(description="The unit vector used.")]
    diagrams: list[Diagram]


class JobResult(BaseModel):
    """Result of a job: its diagrams, and the feature vectors it asked for."""

    job_id: str
    schema_version: str
    value_convention: Annotated[
        ValueConvention | None,
        Field(
            description="What the values are. edge_length: Rips edge lengths (diameters), twice "
            "the ball radius. pixel_value: image values (cubical sublevel). "
            "negated_pixel_value: image values negated (cubical superlevel; a class of bright "
            "pixels born at 200 and dying at 50 is [-200, -50]). signed_distance: distance "
            "to the mask boundary, negative inside (units of spacing). height: projection on "
            "the direction (units of spacing). radial_distance: distance from the center "
            "(units of spacing). geodesic_distance: distance along a graph from the nearest "
            "seed node. node_value: the values given per graph node. Null for diagrams given "
            "as input, whose convention is the client's, and for graph jobs without a "
            "filtration."
        ),
    ]
    units: Annotated[
        str | None,
        Field(description="Unit of the values, when they are lengths or coordinates."),
    ] = None
    diagrams: Annotated[
        list[Diagram],
        Field(
            description="One per dimension 0..max_dim, or the given diagrams normalised; "
            "empty when the filtration has several directions (see per_direction)."
        ),
    ]
    per_direction: Annotated[
        list[DirectionDiagrams] | None,
        Field(
            description="One diagram set per direction, in request order (filtrations "
            "with `directions`)."
        ),
    ] = None
    vectors: Annotated[
        list[FeatureVector], Field(description="One per requested feature, in request order.")
    ] = []
    vector_length: Annotated[int, Field(description="Length of the concatenated vector.")] = 0
    layout: Annotated[
        list[LayoutEntry], Field(description="Slices of the concatenated vector, in order.")
    ] = []
    layout_id: Annotated[
        str | None,
        Field(
            description="SHA-256 of the JSON list of spec_ids in order: equal layout_ids mean "
            "concatenated vectors that can be stacked."
        ),
    ] = None
    descriptors: Annotated[
        NetworkDescriptors | None,
        Field(description='Network descriptors of a graph (output "descriptors").'),
    ] = None
    shells: Annotated[
        list[ShellDescriptors] | None,
        Field(description="Descriptors per concentric shell, from the innermost out."),
    ] = None
    graph: Annotated[
        GraphOutput | None,
        Field(description='The graph the job worked on (output "graph").'),
    ] = None
    unreached_nodes: Annotated[
        int | None,
        Field(
            description="Nodes a geodesic filtration never reaches (no path from a seed): "
            "they and their edges are in no diagram."
        ),
    ] = None
    warnings: Annotated[
        list[FieldError],
        Field(
            description="What the job changed in its input, e.g. self-loops or repeated "
            "edges it dropped, each at the field it concerns."
        ),
    ] = []
    provenance: Provenance
