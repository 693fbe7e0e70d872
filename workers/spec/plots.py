"""Pictures of results: what ``GET /v1/jobs/{id}/plot`` takes and what its job returns."""

from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, Field

__all__ = ["MEDIA_TYPES", "PlotKind", "PlotQuery", "PlotResult", "PlotTask", "PictureFormat"]

PlotKind = Literal["diagram", "barcode", "image"]
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
            description="diagram: persistence diagram (birth against death, the diagonal, a "
            "line for classes that never die); barcode: one bar per class; image: a "
            "persistence image the job computed as a feature."
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
    format: PictureFormat = "svg"
    width: Annotated[PixelSize, Field(description="Picture width in pixels.")] = 640
    height: Annotated[PixelSize, Field(description="Picture height in pixels.")] = 480


class PlotTask(BaseModel):
    """What a plot job draws; its stored array holds the diagram rows (dim, birth, death), or
    the persistence image's (birth, persistence) grid for kind=image."""

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


class PlotResult(BaseModel):
    """Result of a plot job: the picture's bytes, base64-encoded."""

    media_type: str
    base64: str
