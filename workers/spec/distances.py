"""Distances between diagrams or feature vectors: the request and its result."""

from typing import Annotated, Any, Literal

from pydantic import (
    BaseModel,
    ConfigDict,
    Discriminator,
    Field,
    Tag,
    ValidationInfo,
    field_validator,
)

from workers.spec.capabilities import Limits
from workers.spec.never_dying import Cap, cap_rule, checked_cap
from workers.spec.numbers import Coordinate, FiniteFloat
from workers.spec.problems import FieldError
from workers.spec.results import Diagram, Dimension, Pair, Provenance, pair_errors

__all__ = [
    "DIAGRAM_METRICS",
    "DEFAULT_DIRECTIONS",
    "DiagramItem",
    "DistanceRequest",
    "DistanceResult",
    "NeverDying",
    "NullEntry",
    "VECTOR_METRICS",
    "distance_field_errors",
]

DIAGRAM_METRICS = ("bottleneck", "wasserstein", "sliced_wasserstein")
VECTOR_METRICS = ("euclidean", "cosine")
MAX_ORDER = 8
"""Highest Wasserstein order: lengths to this power stay within float64's 16 digits of one
another on diagrams spanning 3 to 5 decades (measured against POT)."""

DEFAULT_DIRECTIONS = 50
"""Directions of sliced_wasserstein when the request names none (echoed in the result)."""

Metric = Literal["bottleneck", "wasserstein", "sliced_wasserstein", "euclidean", "cosine"]


class NeverDying(BaseModel):
    """How a diagram metric treats classes that never die (death null).

    ``separate`` (the default) matches them only to each other, sorted births against sorted
    births, so diagrams with different numbers of them are at distance infinity (null in the
    matrix, with a reason in ``nulls``). ``drop`` leaves them out of both diagrams before
    matching. ``cap`` ends them at ``cap``: a class born at b dies at max(b, cap), so one
    born at or after the cap has zero persistence and is left out; they are then matched
    like every other point, to points or to the diagonal, and every distance is finite.
    """

    model_config = ConfigDict(extra="forbid", json_schema_extra=cap_rule("mode"))

    mode: Annotated[
        Literal["separate", "drop", "cap"],
        Field(
            description='"separate": matched only to each other; "drop": left out; "cap": '
            "ended at `cap`."
        ),
    ] = "separate"
    cap: Cap = None

    @field_validator("cap")
    @classmethod
    def _cap_goes_with_mode(cls, cap: float | None, info: ValidationInfo) -> float | None:
        return checked_cap("mode", info.data.get("mode"), cap)


def _diagram_kind(value: Any) -> str | None:
    """Which member an inline diagram is: raw JSON when validating, parsed when dumping."""
    if isinstance(value, list | tuple):
        return "pairs"
    if isinstance(value, dict | Diagram):
        return "diagram"
    return None


DiagramItem = Annotated[
    Annotated[list[Pair], Tag("pairs")] | Annotated[Diagram, Tag("diagram")],
    Discriminator(
        _diagram_kind,
        custom_error_type="diagram_item",
        custom_error_message="a diagram is a list of [birth, death] pairs or an object "
        '{"dim": k, "pairs": [...]}',
    ),
]
"""One inline diagram: bare pairs, or a diagram object as results carry them."""


def _given(name: str, kind: str) -> dict[str, Any]:
    """JSON Schema: the field ``name`` is given and not null (a JSON ``kind``)."""
    return {"required": [name], "properties": {name: {"type": kind}}}


def _metric_in(metrics: tuple[str, ...]) -> dict[str, Any]:
    return {"properties": {"metric": {"enum": list(metrics)}}}


_SOURCES = ("diagrams", "vectors", "job_ids")

_DISTANCE_RULES: dict[str, Any] = {
    "oneOf": [_given(name, "array") for name in _SOURCES],
    "allOf": [
        {"if": _given("diagrams", "array"), "then": _metric_in(DIAGRAM_METRICS)},
        {"if": _given("vectors", "array"), "then": _metric_in(VECTOR_METRICS)},
        {"if": _given("order", "number"), "then": _metric_in(("wasserstein",))},
        {"if": _given("directions", "integer"), "then": _metric_in(("sliced_wasserstein",))},
        {"if": _given("dim", "integer"), "then": _metric_in(DIAGRAM_METRICS)},
        {"if": _given("never_dying", "object"), "then": _metric_in(DIAGRAM_METRICS)},
        {
            "if": {"allOf": [_given("job_ids", "array"), _metric_in(DIAGRAM_METRICS)]},
            "then": _given("dim", "integer"),
        },
    ],
}
"""The rules between fields that the OpenAPI document states (``distance_field_errors``
checks the same): exactly one of diagrams, vectors or job_ids; diagrams take diagram
metrics and vectors vector metrics; order only with wasserstein, directions only with
sliced_wasserstein, dim and never_dying only with diagram metrics, dim required with
job_ids."""


class DistanceRequest(BaseModel):
    """Body of ``POST /v1/distances``: a metric and N diagrams, vectors or finished jobs.

    Diagram metrics (bottleneck, wasserstein, sliced_wasserstein) use the L-infinity ground
    metric and match classes that never die only to each other, unless ``never_dying`` says
    to drop or cap them. Vector metrics (euclidean,
    cosine) compare feature vectors: given inline, or the concatenated vectors of jobs.
    Exactly one of ``diagrams``, ``vectors`` or ``job_ids``.
    """

    model_config = ConfigDict(extra="forbid", json_schema_extra=_DISTANCE_RULES)

    metric: Metric
    order: Annotated[
        FiniteFloat | None,
        Field(
            ge=1,
            le=MAX_ORDER,
            description="p of wasserstein (default 1); only with wasserstein. Up to 8: "
            "beyond, costs raised to the order span more than float64 resolves.",
        ),
    ] = None
    directions: Annotated[
        int | None,
        Field(
            strict=True,
            ge=1,
            le=10_000,
            description=f"Angles of sliced_wasserstein (default {DEFAULT_DIRECTIONS}).",
        ),
    ] = None
    dim: Annotated[
        Dimension | None,
        Field(
            description="Homology dimension compared; required with job_ids and a diagram metric."
        ),
    ] = None
    never_dying: Annotated[
        NeverDying | None,
        Field(
            description='Classes that never die (diagram metrics only). Default: {"mode": '
            '"separate"}.'
        ),
    ] = None
    diagrams: Annotated[
        list[DiagramItem] | None,
        Field(
            min_length=1,
            description="Diagrams compared by a diagram metric; exactly one of diagrams, "
            "vectors or job_ids.",
        ),
    ] = None
    vectors: Annotated[
        list[Annotated[list[Coordinate], Field(min_length=1)]] | None,
        Field(
            min_length=1,
            description="Feature vectors of one length, compared by a vector metric; exactly "
            "one of diagrams, vectors or job_ids.",
        ),
    ] = None
    job_ids: Annotated[
        list[Annotated[str, Field(max_length=64)]] | None,
        Field(
            min_length=1,
            description="Succeeded jobs of this owner, in matrix order; exactly one of "
            "diagrams, vectors or job_ids.",
        ),
    ] = None

    def field_errors(self, limits: Limits) -> list[FieldError]:
        """Checks that span several fields or depend on configured limits."""
        return distance_field_errors(self, limits)


class NullEntry(BaseModel):
    """Why the distance between rows ``row`` and ``column`` is null."""

    row: int
    column: int
    reason: str


class DistanceResult(BaseModel):
    """The N x N distance matrix (symmetric, zero diagonal), in the order of the request."""

    job_id: str
    schema_version: str
    metric: Metric
    order: float | None = None
    directions: int | None = None
    dim: int | None = None
    never_dying: Annotated[
        NeverDying | None,
        Field(description="How classes that never die were treated (diagram metrics)."),
    ] = None
    ground_metric: Annotated[
        Literal["l_infinity"] | None,
        Field(description="Ground metric between diagram points (diagram metrics only)."),
    ] = None
    units: Annotated[
        str | None,
        Field(
            description="Units of the distances of a diagram metric: the diagrams' units when "
            "every job compared has the same one (job_ids); null for inline diagrams, for "
            "jobs of different or no units, and for vector metrics."
        ),
    ] = None
    count: int
    matrix: Annotated[
        list[list[float | None]],
        Field(description="null where the distance is infinite or undefined; see nulls."),
    ]
    nulls: Annotated[
        list[NullEntry], Field(description="One entry per null above the diagonal.")
    ] = []
    provenance: Provenance


def _sources(request: DistanceRequest) -> list[str]:
    return [name for name in ("diagrams", "vectors", "job_ids") if getattr(request, name)]


def distance_field_errors(request: DistanceRequest, limits: Limits) -> list[FieldError]:
    """Checks of a DistanceRequest that span fields or depend on configured limits."""
    errors: list[FieldError] = []
    sources = _sources(request)
    diagram_metric = request.metric in DIAGRAM_METRICS
    if len(sources) != 1:
        return [
            FieldError(
                pointer="",
                message="send exactly one of diagrams, vectors or job_ids"
                + (f" (got {', '.join(sources)})" if sources else ""),
            )
        ]
    source = sources[0]
    if diagram_metric and source == "vectors":
        errors.append(
            FieldError(
                pointer="/vectors",
                message=f"{request.metric} compares diagrams; vectors take euclidean or cosine",
            )
        )
    if not diagram_metric and source == "diagrams":
        errors.append(
            FieldError(
                pointer="/diagrams",
                message=f"{request.metric} compares feature vectors; diagrams take bottleneck, "
                "wasserstein or sliced_wasserstein",
            )
        )
    if request.order is not None and request.metric != "wasserstein":
        errors.append(FieldError(pointer="/order", message="order is only used by wasserstein"))
    if request.directions is not None and request.metric != "sliced_wasserstein":
        errors.append(
            FieldError(
                pointer="/directions", message="directions is only used by sliced_wasserstein"
            )
        )
    if request.dim is not None and not diagram_metric:
        errors.append(FieldError(pointer="/dim", message="dim is only used by diagram metrics"))
    if request.never_dying is not None and not diagram_metric:
        errors.append(
            FieldError(
                pointer="/never_dying",
                message=f"{request.metric} compares feature vectors, which have no classes "
                "that never die; never_dying is only used by diagram metrics",
            )
        )
    if source == "job_ids" and diagram_metric and request.dim is None:
        errors.append(
            FieldError(pointer="/dim", message="name the homology dimension to compare (dim)")
        )
    items = getattr(request, source)
    if len(items) > limits.max_distance_count:
        errors.append(
            FieldError(
                pointer=f"/{source}",
                message=f"{len(items)} items is above the limit of "
                f"{limits.max_distance_count} per distance matrix",
            )
        )
    if source == "diagrams":
        errors.extend(_diagram_errors(request, limits))
    if source == "vectors":
        width = len(request.vectors[0]) if request.vectors else 0
        for row, vector in enumerate(request.vectors or []):
            if len(vector) != width:
                errors.append(
                    FieldError(
                        pointer=f"/vectors/{row}",
                        message=f"vector {row} has {len(vector)} values, vector 0 has {width}",
                    )
                )
                break
    return errors


def _diagram_errors(request: DistanceRequest, limits: Limits) -> list[FieldError]:
    errors: list[FieldError] = []
    total = 0
    first_dim: tuple[int, int] | None = None  # (index, dim) of the first diagram with a dim
    for index, item in enumerate(request.diagrams or []):
        pairs = item.pairs if isinstance(item, Diagram) else item
        where = f"/diagrams/{index}" + ("/pairs" if isinstance(item, Diagram) else "")
        errors.extend(pair_errors(pairs, where))
        total += len(pairs)
        if not isinstance(item, Diagram):
            continue
        expected = request.dim if request.dim is not None else first_dim and first_dim[1]
        if expected is not None and item.dim != expected:
            said = "dim" if request.dim is not None else f"diagram {first_dim and first_dim[0]}"
            errors.append(
                FieldError(
                    pointer=f"/diagrams/{index}/dim",
                    message=f"diagram {index} is of dimension {item.dim} but {said} is of "
                    f"dimension {expected}; distances compare diagrams of one dimension",
                )
            )
        if first_dim is None:
            first_dim = (index, item.dim)
    if total > limits.max_input_points:
        errors.append(
            FieldError(
                pointer="/diagrams",
                message=f"{total} pairs is above the limit of {limits.max_input_points} per "
                "request",
            )
        )
    return errors
