"""Feature specs: how a diagram of one homology dimension becomes a vector of fixed length.

Every grid parameter is part of the spec, never inferred from the data, so two vectors made
under the same spec mean the same thing whenever and wherever they were computed. A spec's
``spec_id`` is the SHA-256 of its canonical JSON (``canonical_spec``): every field with its
default filled in, plus ``spec_version``, written in the JSON Canonicalization Scheme
(RFC 8785). A client with any JCS library can compute it itself; the server recomputes and
compares it when a request carries one.
"""

import math
from typing import Annotated, Any, Literal

from pydantic import (
    AfterValidator,
    BaseModel,
    ConfigDict,
    Discriminator,
    Field,
    RootModel,
    Tag,
    ValidationInfo,
    field_validator,
)

from workers.spec.arrays import canonical_sha256
from workers.spec.never_dying import Cap, cap_rule, checked_cap
from workers.spec.numbers import Coordinate, FiniteFloat
from workers.spec.problems import FieldError
from workers.spec.results import Dimension

__all__ = [
    "FEATURE_SPEC_VERSION",
    "MIN_SIGMA",
    "BettiCurveSpec",
    "FeatureItem",
    "FeatureSpec",
    "FeatureSpecAnswer",
    "FeatureSpecBody",
    "feature_spec_answer",
    "LandscapeSpec",
    "PersistenceImageSpec",
    "SpecReference",
    "SummarySpec",
    "canonical_spec",
    "spec_id_mismatch",
    "spec_id_of",
    "vector_length",
    "vector_shape",
]

FEATURE_SPEC_VERSION = "1"
"""Version of the feature computations; part of every spec_id, bumped if any value changes."""

MIN_SIGMA = 1e-100
"""Smallest Gaussian width: 1 / sigma and the erf arguments stay finite in float64."""


def _increasing(bounds: tuple[float, float]) -> tuple[float, float]:
    if not bounds[0] < bounds[1]:
        raise ValueError(f"must be [low, high] with low < high, got {list(bounds)}")
    return bounds


Range = Annotated[
    tuple[Coordinate, Coordinate],
    AfterValidator(_increasing),
    Field(description="[low, high] with low < high, in the units of the diagram values."),
]
Count = Annotated[int, Field(strict=True, ge=1)]


class _Feature(BaseModel):
    """Fields every feature spec has."""

    model_config = ConfigDict(extra="forbid", json_schema_extra=cap_rule("infinite"))

    dim: Dimension
    spec_id: Annotated[
        str | None,
        Field(
            pattern="^[0-9a-f]{64}$",
            description="Optional: the id this spec is expected to have; a request whose spec "
            "hashes to another id is refused (422). Not part of the canonical form.",
        ),
    ] = None
    infinite: Annotated[
        Literal["drop", "cap"],
        Field(
            description='Classes that never die: "drop" leaves them out; "cap" ends them at '
            "`cap` (a class born at or after the cap then has zero persistence and is left "
            "out)."
        ),
    ] = "drop"
    cap: Cap = None

    @field_validator("cap")
    @classmethod
    def _cap_goes_with_infinite(cls, cap: float | None, info: ValidationInfo) -> float | None:
        return checked_cap("infinite", info.data.get("infinite"), cap)


class LinearWeight(BaseModel):
    """w = min(p / max_persistence, 1): ramps up to 1 at ``max_persistence``."""

    model_config = ConfigDict(extra="forbid")

    type: Literal["linear"]
    max_persistence: Annotated[Coordinate, Field(gt=0)]


class ConstantWeight(BaseModel):
    """w = 1 for every point (points on the diagonal are left out all the same)."""

    model_config = ConfigDict(extra="forbid")

    type: Literal["constant"]


class PowerWeight(BaseModel):
    """w = p ** exponent."""

    model_config = ConfigDict(extra="forbid")

    type: Literal["power"]
    exponent: Annotated[FiniteFloat, Field(gt=0, le=16)]


Weight = Annotated[LinearWeight | ConstantWeight | PowerWeight, Field(discriminator="type")]


class PersistenceImageSpec(_Feature):
    """Persistence image (Adams et al. 2017) in birth-persistence coordinates.

    Pixel values are integrals of the weighted Gaussians over each pixel. Shape
    [nx, ny]: row i is the i-th birth interval, column j the j-th persistence interval;
    values are flattened row-major.
    """

    type: Literal["persistence_image"]
    birth_range: Range
    persistence_range: Range
    resolution: Annotated[
        tuple[Count, Count], Field(description="[nx, ny]: pixels along birth, persistence.")
    ]
    sigma: Annotated[
        Coordinate,
        Field(ge=MIN_SIGMA, description="Standard deviation of the Gaussian, value units."),
    ]
    weight: Weight

    @field_validator("persistence_range")
    @classmethod
    def _persistence_is_not_negative(cls, bounds: tuple[float, float]) -> tuple[float, float]:
        if bounds[0] < 0:
            raise ValueError("persistence_range cannot start below 0")
        return bounds


class LandscapeSpec(_Feature):
    """Persistence landscape (Bubenik 2015): lambda_1..lambda_levels sampled at ``samples``
    evenly spaced values of t from t_range[0] to t_range[1] (both included). Shape
    [levels, samples]."""

    type: Literal["landscape"]
    levels: Count
    t_range: Range
    samples: Annotated[int, Field(strict=True, ge=2)]


class BettiCurveSpec(_Feature):
    """Betti curve: the number of classes with birth <= t < death at ``samples`` evenly
    spaced values of t from t_range[0] to t_range[1] (both included). Shape [samples]."""

    type: Literal["betti_curve"]
    t_range: Range
    samples: Annotated[int, Field(strict=True, ge=2)]


DEFAULT_QUANTILES = (0.1, 0.25, 0.5, 0.75, 0.9)


def _distinct(levels: list[float]) -> list[float]:
    if len(set(levels)) != len(levels):
        raise ValueError("each quantile may appear once")
    return levels


class SummarySpec(_Feature):
    """Lifetime statistics, in this order: count, total_persistence (sum of lifetime ** order),
    max_persistence, mean_lifetime, std_lifetime (population), persistent_entropy (natural
    log), then one quantile of lifetime per entry of ``quantiles`` (linear interpolation).
    An empty diagram gives zeros. Shape [6 + len(quantiles)]."""

    type: Literal["summary"]
    order: Annotated[FiniteFloat, Field(gt=0, le=16)] = 1.0
    quantiles: Annotated[
        list[Annotated[FiniteFloat, Field(ge=0, le=1)]],
        AfterValidator(_distinct),
        Field(
            max_length=64,
            description="Distinct levels in [0, 1].",
            json_schema_extra={"uniqueItems": True},
        ),
    ] = list(DEFAULT_QUANTILES)


FeatureSpec = Annotated[
    PersistenceImageSpec | LandscapeSpec | BettiCurveSpec | SummarySpec,
    Field(discriminator="type"),
]
"""Every vectorisation, told apart by ``type``."""


class SpecReference(BaseModel):
    """A feature spec registered earlier with ``POST /v1/feature-specs``, by its id."""

    model_config = ConfigDict(extra="forbid")

    spec_id: Annotated[str, Field(pattern="^[0-9a-f]{64}$")]


def _feature_kind(value: Any) -> str | None:
    """Which member a feature item is: raw JSON when validating, a model when dumping."""
    if isinstance(value, dict):
        return "spec" if "type" in value else "reference"
    if isinstance(value, SpecReference):
        return "reference"
    if isinstance(value, _Feature):
        return "spec"
    return None


FeatureItem = Annotated[
    Annotated[FeatureSpec, Tag("spec")] | Annotated[SpecReference, Tag("reference")],
    Discriminator(
        _feature_kind,
        custom_error_type="feature_item",
        custom_error_message='a feature is an object: a spec with "type" and "dim", or '
        '{"spec_id": ...} naming a registered spec',
    ),
]
"""One entry of a request's ``features``: a whole spec, or the id of a registered one."""


class FeatureSpecAnswer(BaseModel):
    """Answer of ``POST /v1/feature-specs``: the canonical form and its id."""

    spec_id: str
    spec_version: str
    vector_length: int
    shape: list[int]
    canonical: Annotated[
        dict[str, Any],
        Field(description="The spec with every default filled in; spec_id hashes this."),
    ]


class FeatureSpecBody(RootModel[FeatureSpec]):
    """Body of ``POST /v1/feature-specs``: one feature spec."""


def feature_spec_answer(spec: BaseModel) -> FeatureSpecAnswer:
    """What ``/v1/feature-specs`` answers for ``spec``."""
    return FeatureSpecAnswer(
        spec_id=spec_id_of(spec),
        spec_version=FEATURE_SPEC_VERSION,
        vector_length=vector_length(spec),
        shape=vector_shape(spec),
        canonical=canonical_spec(spec),
    )


def canonical_spec(spec: BaseModel) -> dict[str, Any]:
    """The spec as hashed: every field (defaults included) plus ``spec_version``."""
    document = spec.model_dump(mode="json", exclude={"spec_id"})
    document["spec_version"] = FEATURE_SPEC_VERSION
    return document


def spec_id_of(spec: BaseModel) -> str:
    """SHA-256 of the canonical JSON (RFC 8785) of ``spec``, UTF-8."""
    return canonical_sha256(canonical_spec(spec))


def spec_id_mismatch(spec: BaseModel, pointer: str) -> FieldError | None:
    """A FieldError at ``pointer`` when ``spec`` carries a spec_id it does not hash to."""
    given = getattr(spec, "spec_id", None)
    actual = spec_id_of(spec)
    if given is None or given == actual:
        return None
    return FieldError(
        pointer=pointer,
        message=f"this spec hashes to {actual}, not to the spec_id given; the spec differs "
        "from the one the id names",
    )


def vector_shape(spec: BaseModel) -> list[int]:
    """Shape of the values a spec produces (their product is the vector length)."""
    if isinstance(spec, PersistenceImageSpec):
        return list(spec.resolution)
    if isinstance(spec, LandscapeSpec):
        return [spec.levels, spec.samples]
    if isinstance(spec, BettiCurveSpec):
        return [spec.samples]
    if isinstance(spec, SummarySpec):
        return [6 + len(spec.quantiles)]
    raise TypeError(f"not a feature spec: {type(spec).__name__}")


def vector_length(spec: BaseModel) -> int:
    """Number of values a spec produces."""
    return math.prod(vector_shape(spec))
