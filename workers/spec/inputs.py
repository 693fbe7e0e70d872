"""What a job computes on."""

from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, Field

from workers.spec.numbers import Coordinate
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


class DiagramsInput(BaseModel):
    """Persistence diagrams a client already has (from lacuna or elsewhere), to vectorise.

    At most one diagram per dimension; births finite, deaths finite (>= birth) or null.
    """

    model_config = ConfigDict(extra="forbid")

    type: Literal["diagrams"]
    diagrams: Annotated[list[Diagram], Field(min_length=1, max_length=8)]
    units: Units = None


Input = Annotated[PointsInput | DiagramsInput, Field(discriminator="type")]
"""Every input type, told apart by ``type``."""
