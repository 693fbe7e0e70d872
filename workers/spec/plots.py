"""Pictures of results: what ``GET /v1/jobs/{id}/plot`` takes and what its job returns."""

from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, Field

__all__ = [
    "DRAWING_SAMPLE_SHA256",
    "DRAWING_VERSION",
    "MEDIA_TYPES",
    "PAIR_KINDS",
    "PlotKind",
    "PlotQuery",
    "PlotResult",
    "PlotTask",
    "PictureFormat",
]

PlotKind = Literal["diagram", "barcode", "image", "matrix"]
PAIR_KINDS = ("diagram", "barcode")
"""Kinds that draw (birth, death) pairs, which min_persistence and top choose among."""

DRAWING_VERSION = "2"
"""Version of the pictures' look: part of every picture's ETag, so that a change of the
drawing (raise it with any change of workers.pictures.drawing's output) is never served
from a cache as the old picture."""

DRAWING_SAMPLE_SHA256 = "3a02626fe1aad8f49cf6b0d7d9b81e32c33ddd856987df4534c9b98ec183287f"
"""The drawing at DRAWING_VERSION: hash of a small fixed diagram, barcode and matrix drawn
as SVG (tests/pictures/test_drawing_version.py). That test fails when the drawing changes,
asking for a new DRAWING_VERSION with the new hash."""


PictureFormat = Literal["svg", "png"]

MEDIA_TYPES: dict[str, str] = {"svg": "image/svg+xml", "png": "image/png"}
"""Media type of each picture format."""

PixelSize = Annotated[int, Field(ge=160, le=4096)]
"""Picture sizes drawn (as workers.pictures.drawing draws them)."""


class PlotQuery(BaseModel):
    """Query parameters of ``GET /v1/jobs/{id}/plot``; error pointers point into the query
    taken as an object (``/dim`` is ``?dim=``)."""

    model_config = ConfigDict(extra="forbid")

    kind: Annotated[
        PlotKind,
        Field(
            description="diagram: persistence diagram (death against birth, classes that "
            "never die in a strip above); barcode: one bar per class; image: a persistence "
            "image the job computed as a feature; matrix: the heatmap of a distance matrix "
            "(a job of POST /v1/distances)."
        ),
    ] = "diagram"
    dim: Annotated[
        int | None,
        Field(
            ge=0,
            le=3,
            description="Homology dimension to draw (default: every dimension of the result; "
            "for kind=image, the first persistence image of any dimension).",
        ),
    ] = None
    direction: Annotated[
        int | None,
        Field(ge=0, description="Which direction's diagrams, for a job with several."),
    ] = None
    min_persistence: Annotated[
        float | None,
        Field(
            ge=0,
            allow_inf_nan=False,
            description="Draw only pairs with death - birth at least this (in the result's "
            "units); classes that never die always count as persistent enough. kind=diagram "
            "and barcode only.",
        ),
    ] = None
    top: Annotated[
        int | None,
        Field(
            ge=1,
            le=1_000_000,
            description="Draw only the this many most persistent pairs of each dimension "
            "(classes that never die first; ties: the earlier pair). kind=diagram and barcode "
            "only.",
        ),
    ] = None
    format: PictureFormat = "svg"
    width: Annotated[PixelSize, Field(description="Picture width in pixels.")] = 640
    height: Annotated[PixelSize, Field(description="Picture height in pixels.")] = 480


class PlotTask(BaseModel):
    """What a plot job draws. Its stored array: for diagrams and barcodes (k, 4) rows of
    (dim, birth, death, row of the pair in the result's diagram), the pairs chosen; the
    persistence image's (birth, persistence) grid for kind=image; the N x N distance matrix
    (inf or NaN where the result has null) for kind=matrix."""

    model_config = ConfigDict(extra="forbid")

    type: Literal["plot"]
    kind: PlotKind
    format: PictureFormat
    width: PixelSize
    height: PixelSize
    units: str | None = None
    value_name: Annotated[str, Field(description="What the values are (axis labels).")]
    dims: Annotated[list[int], Field(description="Dimensions drawn (legend entries).")] = []
    birth_range: tuple[float, float] | None = None
    persistence_range: tuple[float, float] | None = None
    caption: Annotated[
        str | None, Field(description="What the picture leaves out (a filter's choice).")
    ] = None
    labels: Annotated[list[str] | None, Field(description="Row and column labels of a matrix.")] = (
        None
    )
    null_meaning: Annotated[
        str | None, Field(description="What a null entry of a matrix means.")
    ] = None


class PlotResult(BaseModel):
    """Result of a plot job: the picture's bytes, base64-encoded."""

    media_type: str
    base64: str
