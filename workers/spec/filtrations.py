"""How a job builds its filtration."""

from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, Field

from workers.spec.numbers import FiniteFloat


class Subsample(BaseModel):
    """Reduce the point set before building the filtration.

    ``maxmin`` is greedy furthest-point sampling started from a seeded random point;
    ``random`` draws ``size`` distinct points uniformly. Both are reproducible from ``seed``.
    """

    model_config = ConfigDict(extra="forbid")

    method: Literal["maxmin", "random"]
    size: Annotated[int, Field(strict=True, ge=1, description="Number of points kept (K <= N).")]
    seed: Annotated[int, Field(strict=True, ge=0, le=2**63 - 1)] = 0


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


Filtration = Annotated[RipsFiltration, Field(discriminator="type")]
"""Every filtration type, told apart by ``type``."""
