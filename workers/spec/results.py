"""What a finished job returns."""

from collections.abc import Iterable
from functools import cache
from importlib.metadata import version
from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, Field

from workers.spec.networks import GraphOutput, NetworkDescriptors, ShellDescriptors
from workers.spec.numbers import Coordinate
from workers.spec.problems import FieldError

BASE_PACKAGES = ("lacuna", "numpy", "scipy")
"""Distributions (importlib.metadata names) every job's code runs on, so every provenance
names them."""

ENGINE_PACKAGES: dict[str, tuple[str, ...]] = {
    "rips-cut-collapse-float64": ("gudhi",),
    "dowker-witness-float64": ("gudhi",),
}
"""Distributions an engine runs on beyond ``BASE_PACKAGES``."""

SKELETON_PACKAGES = ("scikit-image",)
"""Distributions a mask's skeleton graph is made with (scikit-image skeletonize)."""

Engine = Literal[
    "rips-cut-collapse-float64",
    "dowker-witness-float64",
    "cubical-lacuna-c",
    "graph-lacuna-c",
    "bottleneck-lacuna",
    "wasserstein-lacuna",
    "sliced-wasserstein-lacuna",
    "vector-lacuna",
]
"""lacuna's own name for the method that computed a result; the libraries it runs on are
named in ``versions``, never in the engine's name."""

ENGINES: dict[Engine, str] = {
    "rips-cut-collapse-float64": "Vietoris-Rips persistence in float64: the filtration "
    "cut where the relative neighbourhood graph and a subsample bound the deaths, dense "
    "graphs reduced by edge collapse, then Ripser's reduction (gudhi's build, its version "
    "under gudhi)",
    "dowker-witness-float64": "Dowker persistence of two point classes in float64: the "
    "witness-vertex pairs within max_radius from scipy's k-d tree, every simplex a witness "
    "sees at its least witness radius (numpy), persistence by gudhi's SimplexTree (Z/2)",
    "cubical-lacuna-c": "cubical persistence of pixel or voxel values by lacuna's own C "
    "engine (union-find, Alexander duality, cohomology in 3D)",
    "graph-lacuna-c": "lower-star persistence of node values on a graph by lacuna's own C "
    "engine (union-find, elder rule)",
    "bottleneck-lacuna": "exact bottleneck distance: binary search over candidate costs with "
    "scipy's Hopcroft-Karp matching",
    "wasserstein-lacuna": "exact Wasserstein distance: the assignment problem solved by "
    "scipy's LAPJVsp",
    "sliced-wasserstein-lacuna": "sliced Wasserstein distance on evenly spaced directions, numpy",
    "vector-lacuna": "euclidean or cosine distance between feature vectors, numpy and scipy",
}
"""Every engine and what it is, as /v1/capabilities lists them."""

ALL_PACKAGES = tuple(
    dict.fromkeys(
        (*BASE_PACKAGES, *(p for ps in ENGINE_PACKAGES.values() for p in ps), *SKELETON_PACKAGES)
    )
)
"""Every distribution a provenance may name."""


@cache  # reading package metadata costs ~5 ms, and a process never changes its packages
def _installed_versions(names: tuple[str, ...]) -> tuple[tuple[str, str], ...]:
    return tuple((name, version(name)) for name in names)


def package_versions(extra: Iterable[str] = ()) -> dict[str, str]:
    """Versions of ``BASE_PACKAGES`` and of the ``extra`` distributions a job also ran on,
    by their importlib.metadata distribution names."""
    names = tuple(dict.fromkeys((*BASE_PACKAGES, *extra)))
    return dict(_installed_versions(names))


def engine_packages(engine: str | None) -> tuple[str, ...]:
    """The distributions ``engine`` runs on beyond the base ones."""
    return ENGINE_PACKAGES.get(engine or "", ())


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
            "values as little-endian float64 in row-major order. For labelled points the "
            "array is (n, d + 1): each point's coordinates, then the position of its class "
            "in `populations` (the class names, sorted), whose names the request hash covers."
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
    versions: Annotated[
        dict[str, str],
        Field(
            description="Version of each installed distribution (by its importlib.metadata "
            "name) whose code computed the result: lacuna, numpy and scipy always, gudhi for "
            "Rips, scikit-image for a mask's skeleton graph."
        ),
    ]
    engine: Annotated[
        Engine | None,
        Field(
            description="lacuna's name for the method that computed the diagrams or the "
            "distances (see engines in /v1/capabilities); null for given diagrams and for "
            "graph jobs without a filtration."
        ),
    ] = None
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
    "witness_radius",
    "pixel_value",
    "negated_pixel_value",
    "signed_distance",
    "height",
    "radial_distance",
    "geodesic_distance",
    "node_value",
]
"""What the numbers of a diagram are."""

LENGTH_CONVENTIONS: frozenset[ValueConvention] = frozenset(
    {
        "edge_length",
        "witness_radius",
        "signed_distance",
        "height",
        "radial_distance",
        "geodesic_distance",
    }
)
"""Conventions whose values are lengths, in the unit of the coordinates; the others (pixel
and node values) carry no unit."""


class PopulationCount(BaseModel):
    """One class of labelled points: how many points it has, and whether the job computed on
    them."""

    name: str
    count: int
    computed: Annotated[
        bool, Field(description="Are its points among those the filtration was built on?")
    ]


class NearestOtherClass(BaseModel):
    """How near the points of one class (``source``) sit to the points of another
    (``target``): each source point's distance to its nearest target point, summarised, in
    the coordinate units. The pair is ordered: (A, B) is not (B, A)."""

    source: str
    target: str
    first_quartile: float
    median: float
    third_quartile: float
    mean: float
    fraction_within: Annotated[
        list[float],
        Field(
            description="Per radius of `radii`, in order: the fraction of source points with "
            "a target point at distance <= the radius."
        ),
    ]


class CellMixing(BaseModel):
    """Cross-population descriptors of labelled points (output "descriptors"): for every
    ordered pair of distinct classes, the nearest-other-class distances (quartiles by
    numpy.percentile's linear interpolation) and the fractions within each radius. The count
    of each class is in `populations`. Shape statistics for research, not a diagnosis."""

    radii: Annotated[list[float], Field(description="The radii of `fraction_within`.")]
    pairs: Annotated[
        list[NearestOtherClass],
        Field(description="Every ordered pair of distinct classes, sources in name order."),
    ]


class DowkerOutput(BaseModel):
    """How a Dowker filtration was built: its classes and the side computed."""

    vertices: Annotated[str, Field(description="The class the request named as vertices.")]
    witnesses: Annotated[str, Field(description="The class the request named as witnesses.")]
    side_used: Annotated[
        Literal["vertices", "witnesses"],
        Field(
            description='"vertices": built on the vertices class as named; "witnesses": on '
            "the witnesses class, the roles swapped (the same diagrams by Dowker duality)."
        ),
    ]
    simplex_count: Annotated[
        int, Field(description="Simplices of the complex built (dimensions 0..max_dim + 1).")
    ]


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
            "the ball radius. witness_radius: Dowker values, a radius in the coordinate "
            "units; a simplex enters at the least, over witnesses, of the largest distance "
            "from the witness to its vertices. pixel_value: image values (cubical sublevel). "
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
        Field(
            description="Unit of the diagram values: the unit of the coordinates when the "
            "values are lengths (edge_length, witness_radius, signed_distance, height, "
            "radial_distance, geodesic_distance); null for pixel and node values, which have "
            "none. For given diagrams, the input's units as sent."
        ),
    ] = None
    coordinate_units: Annotated[
        str | None,
        Field(
            description="Unit of the coordinates: of the points, of graph nodes (after "
            'spacing), or of the pixel grid (the unit of spacing; "pixel" for an image or '
            "mask sent without spacing). Null when the input gave none, and for given "
            "diagrams."
        ),
    ] = None
    spacing: Annotated[
        list[float] | None,
        Field(
            description="The spacing the job used (image, mask and graph inputs), in "
            "array-axis order for images and masks and in node-coordinate order for graphs; "
            "null when none was sent (1 per axis)."
        ),
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
    populations: Annotated[
        list[PopulationCount] | None,
        Field(
            description="Labelled points: each class, in the order of their names, with its "
            "count; the filtration was built on the classes marked computed (the one its "
            "population names, or all)."
        ),
    ] = None
    cell_mixing: Annotated[
        CellMixing | None,
        Field(
            description='Labelled points: the cross-population descriptors (output "descriptors").'
        ),
    ] = None
    dowker: Annotated[
        DowkerOutput | None,
        Field(description="Dowker filtrations: the classes and the side computed."),
    ] = None
    warnings: Annotated[
        list[FieldError],
        Field(
            description="What the job changed in its input, e.g. self-loops or repeated "
            "edges it dropped, each at the field it concerns."
        ),
    ] = []
    provenance: Provenance
