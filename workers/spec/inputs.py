"""What a job computes on."""

from typing import Annotated, Any, Literal

from pydantic import BaseModel, ConfigDict, Discriminator, Field, Tag

from workers.spec.filtrations import NodeIndex
from workers.spec.numbers import Coordinate, FiniteFloat
from workers.spec.results import Diagram

MAX_COORDINATES = 16
"""Highest ambient dimension d accepted for point sets."""

Coordinates = Annotated[list[Coordinate], Field(min_length=1, max_length=MAX_COORDINATES)]

Units = Annotated[
    str | None,
    Field(max_length=32, description='Unit of the values (e.g. "um"), echoed in the result.'),
]


class PointsInput(BaseModel):
    """A finite point set in R^d: N rows of d coordinates (1 <= d <= 16)."""

    model_config = ConfigDict(extra="forbid")

    type: Literal["points"]
    points: Annotated[
        list[Coordinates],
        Field(min_length=1, description="N x d finite numbers; every row has the same length d."),
    ]
    units: Units = None


MAX_LABEL_CHARS = 64
"""Longest class label of a labelled point."""

Label = Annotated[str, Field(min_length=1, max_length=MAX_LABEL_CHARS)]
"""The class of one labelled point (a cell population such as "tumour" or "immune")."""

ColumnName = Annotated[str, Field(min_length=1, max_length=256)]


class LabelledPointsInput(BaseModel):
    """Points in 2D or 3D, each of one class (cell populations of a tissue section).

    Give ``points`` and ``labels`` as JSON, or upload a table as the ``data`` part of a
    multipart request: CSV (``format`` "csv": a header row, the coordinate ``columns`` and the
    ``label_column``) or a GeoJSON FeatureCollection (``format`` "geojson", RFC 7946: Point
    features, or Polygon and MultiPolygon features taken at their centroid, the class in the
    ``label_property`` of each feature). Classes are numbered in sorted order of their names.
    """

    model_config = ConfigDict(extra="forbid")

    type: Literal["labelled_points"]
    points: Annotated[
        list[Annotated[list[Coordinate], Field(min_length=2, max_length=3)]] | None,
        Field(
            description="N rows of 2 or 3 coordinates, every row the same length. Leave out "
            "when the table is uploaded."
        ),
    ] = None
    labels: Annotated[
        list[Label] | None,
        Field(description="The class of each point, one per row of points (JSON only)."),
    ] = None
    format: Annotated[
        Literal["csv", "geojson"] | None,
        Field(description="What the uploaded data part holds (uploads only)."),
    ] = None
    columns: Annotated[
        list[ColumnName] | None,
        Field(
            min_length=2,
            max_length=3,
            description='CSV: the coordinate columns, in order (default "x", "y").',
        ),
    ] = None
    label_column: Annotated[
        ColumnName | None, Field(description="CSV: the column holding each point's class.")
    ] = None
    delimiter: Annotated[
        Literal[",", "\t"] | None,
        Field(
            description="CSV: the field separator. Default: a tab if the header line has tabs "
            "and no commas, else a comma."
        ),
    ] = None
    label_property: Annotated[
        ColumnName | None,
        Field(description='GeoJSON: the feature property holding the class (default "class").'),
    ] = None
    units: Units = None


class DiagramsInput(BaseModel):
    """Persistence diagrams a client already has (from lacuna or elsewhere), to vectorise.

    At most one diagram per dimension; births finite, deaths finite (>= birth) or null.
    """

    model_config = ConfigDict(extra="forbid")

    type: Literal["diagrams"]
    diagrams: Annotated[list[Diagram], Field(min_length=1, max_length=8)]
    units: Units = None


MAX_PIXEL_MAGNITUDE = 1e100
"""Largest absolute pixel value: the bound of every number in a diagram."""

Pixel = Annotated[FiniteFloat, Field(ge=-MAX_PIXEL_MAGNITUDE, le=MAX_PIXEL_MAGNITUDE)]
"""One pixel or voxel value: finite, and within the bound of diagram values."""


def _nesting(values: Any) -> str:
    """Tag of a nested list by its depth: rows of numbers (2D) or planes of rows (3D)."""
    if isinstance(values, list) and values and isinstance(values[0], list):
        first = values[0]
        if first and isinstance(first[0], list):
            return "planes"
    return "rows"


PixelValues = Annotated[
    Annotated[list[Annotated[list[Pixel], Field(min_length=1)]], Field(min_length=1), Tag("rows")]
    | Annotated[
        list[Annotated[list[Annotated[list[Pixel], Field(min_length=1)]], Field(min_length=1)]],
        Field(min_length=1),
        Tag("planes"),
    ],
    Discriminator(_nesting),
    Field(
        description="The array as nested lists in array-axis order: rows of pixels (2D) or "
        "planes of rows (3D); every row the same length. Leave out when the array is "
        "uploaded as the `data` part of a multipart request."
    ),
]

MIN_SPACING, MAX_SPACING = 1e-30, 1e30
"""Bounds of a pixel size: squared distances neither underflow nor overflow, and lengths across
the largest array stay far inside the bound of diagram values."""

Spacing = Annotated[
    list[Annotated[FiniteFloat, Field(ge=MIN_SPACING, le=MAX_SPACING)]] | None,
    Field(
        min_length=2,
        max_length=3,
        description="Physical size of a pixel or voxel along each array axis, in array-axis "
        "order (e.g. [2.0, 0.5, 0.5] for z, y, x). Default: 1 per axis (values in pixels).",
    ),
]

ArrayUnits = Annotated[
    str | None,
    Field(
        max_length=32,
        description='Unit of `spacing` (e.g. "um"), echoed in results whose values are '
        'lengths; only with spacing (without it, lengths are in pixels and results say "pixel").',
    ),
]


class ImageInput(BaseModel):
    """A 2D image or 3D volume of scalar values (intensities, probabilities, heights)."""

    model_config = ConfigDict(extra="forbid")

    type: Literal["image"]
    values: PixelValues | None = None
    spacing: Spacing = None
    units: ArrayUnits = None


class MaskInput(BaseModel):
    """A 2D or 3D segmentation: 0 is background, any positive integer is foreground (binary
    masks as 0/1 or 0/255, and label images, whose labels together are the foreground)."""

    model_config = ConfigDict(extra="forbid")

    type: Literal["mask"]
    values: PixelValues | None = None
    spacing: Spacing = None
    units: ArrayUnits = None
    skeletonize: Annotated[
        bool,
        Field(
            strict=True,
            description="Work on the mask's skeleton graph instead of its pixels: the mask is "
            "thinned to one-pixel-wide centre lines (scikit-image skeletonize), skeleton "
            "pixels become nodes at their physical centres, touching pixels are joined by "
            "edges, adjacent junction pixels merge into one branch point, and each node's "
            "radius is the distance to the background. The job then takes graph filtrations "
            'and outputs, like a "graph" input.',
        ),
    ] = False


MAX_GRAPH_MAGNITUDE = 1e90
"""Largest absolute node coordinate (after spacing) and edge length: sums of lengths along a
million edges stay within the bound of diagram values."""

GraphLength = Annotated[FiniteFloat, Field(ge=0, le=MAX_GRAPH_MAGNITUDE)]


class GraphInput(BaseModel):
    """A vessel or fibre network: nodes at physical coordinates and edges along the vessels.

    Give ``nodes`` and ``edges`` as JSON, or upload a GraphML file as the ``data`` part of a
    multipart request (node attributes ``x``, ``y`` and, in 3D, ``z``; optional node attribute
    ``radius`` and edge attribute ``length``). Edges are undirected; self-loops and repeated
    edges are dropped, and the result's ``warnings`` say which.
    """

    model_config = ConfigDict(extra="forbid")

    type: Literal["graph"]
    nodes: Annotated[
        list[Annotated[list[Coordinate], Field(min_length=2, max_length=3)]] | None,
        Field(
            description="N rows of 2 or 3 coordinates (x, y[, z]), every row the same length. "
            "Leave out when the graph is uploaded as GraphML."
        ),
    ] = None
    edges: Annotated[
        list[tuple[NodeIndex, NodeIndex]] | None,
        Field(description="Pairs of node positions (0-based). Default: no edges."),
    ] = None
    radius: Annotated[
        list[GraphLength] | None,
        Field(description="Vessel radius at each node (one per node), in units."),
    ] = None
    length: Annotated[
        list[GraphLength] | None,
        Field(
            description="Length of each edge along the vessel (one per edge), in units. "
            "Default: the Euclidean distance of its end nodes."
        ),
    ] = None
    spacing: Annotated[
        list[Annotated[FiniteFloat, Field(ge=MIN_SPACING, le=MAX_SPACING)]] | None,
        Field(
            min_length=2,
            max_length=3,
            description="Scale of each coordinate axis, for nodes given in pixel or voxel "
            "indices (e.g. [0.5, 0.5, 2.0]); coordinates are multiplied by it. Given "
            "`length` and `radius` values are taken as they are.",
        ),
    ] = None
    units: Units = None


ArrayInput = ImageInput | MaskInput
"""Inputs that are arrays of pixels or voxels."""

Input = Annotated[
    PointsInput | LabelledPointsInput | DiagramsInput | ImageInput | MaskInput | GraphInput,
    Field(discriminator="type"),
]
"""Every input type, told apart by ``type``."""
