"""What a finished job returns."""

from functools import cache
from importlib.metadata import version
from typing import Annotated, Literal

from pydantic import BaseModel, Field

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


Pair = tuple[float, float | None]
"""(birth, death); death null means the class never dies within the filtration."""


class Diagram(BaseModel):
    """Persistence diagram of one homology dimension."""

    dim: int
    pairs: Annotated[
        list[Pair],
        Field(description="Sorted by (birth, death), null deaths last; no zero-length pairs."),
    ]


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
            description="SHA-256 of the canonical JSON (sorted keys, no spaces) of the request "
            "with the input array replaced by input_sha256."
        ),
    ]
    versions: dict[str, str]
    elapsed_s: Annotated[float, Field(description="Wall time of the computation itself.")]
    subsample_indices: Annotated[
        list[int] | None, Field(description="Rows of the input kept by subsample, in order.")
    ] = None
    subsample_covering_radius: Annotated[
        float | None,
        Field(description="Hausdorff distance from the subsample to the full point set."),
    ] = None


class DiagramResult(BaseModel):
    """Result of a job: one diagram per dimension 0..max_dim."""

    job_id: str
    schema_version: str
    value_convention: Annotated[
        Literal["edge_length"],
        Field(description="Rips values are edge lengths (diameters), twice the ball radius."),
    ]
    units: str | None = None
    diagrams: list[Diagram]
    provenance: Provenance
