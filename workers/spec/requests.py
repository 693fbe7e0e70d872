"""The bodies of ``POST /v1/jobs`` and their checks that span several fields."""

from typing import Annotated, Any

from pydantic import BaseModel, ConfigDict, Field

from workers.spec.capabilities import Limits
from workers.spec.features import (
    BettiCurveSpec,
    FeatureItem,
    FeatureSpec,
    LandscapeSpec,
    PersistenceImageSpec,
    SpecReference,
    spec_id_mismatch,
    spec_id_of,
    vector_length,
)
from workers.spec.filtrations import GRAPH_FILTRATIONS, MASK_FILTRATIONS, Filtration
from workers.spec.inputs import Input
from workers.spec.networks import DescriptorOptions, OutputKind
from workers.spec.problems import FieldError

__all__ = ["JobRequest", "feature_errors", "length_error", "output_errors"]

_SIZE_FIELD = {
    PersistenceImageSpec: "resolution",
    LandscapeSpec: "samples",
    BettiCurveSpec: "samples",
}
"""The field that sets a spec's vector length, pointed at when it is too long."""


def _input_is(input_type: str, **fields: Any) -> dict[str, Any]:
    """JSON Schema: the request's input is of ``input_type`` (and has these field values)."""
    properties = {"type": {"const": input_type}} | {k: {"const": v} for k, v in fields.items()}
    return {
        "required": ["input"],
        "properties": {"input": {"required": list(properties), "properties": properties}},
    }


def _filtration_of(types: tuple[str, ...], required: bool = True) -> dict[str, Any]:
    """JSON Schema: the filtration is one of ``types`` (and given, when ``required``)."""
    of_type = {"type": "object", "properties": {"type": {"enum": list(types)}}}
    if not required:
        return {"properties": {"filtration": {"anyOf": [of_type, {"type": "null"}]}}}
    return {"required": ["filtration"], "properties": {"filtration": of_type}}


_ASKS_FOR_DIAGRAMS = {
    "anyOf": [
        {"not": {"required": ["output"]}},
        {"properties": {"output": {"contains": {"const": "diagrams"}}}},
    ]
}
"""JSON Schema: the request's output holds "diagrams" (the default)."""

_SKELETON_FILTRATIONS = tuple(name for name in GRAPH_FILTRATIONS if name != "attribute")
"""Filtrations of a mask's skeleton graph: its nodes exist only on the worker, so they cannot
carry given values."""


def _graph_filtration(types: tuple[str, ...]) -> dict[str, Any]:
    """JSON Schema: a filtration of one of ``types``, required when diagrams are asked for."""
    return {
        **_filtration_of(types, required=False),
        "if": _ASKS_FOR_DIAGRAMS,
        "then": _filtration_of(types),
    }


_FILTRATION_BY_INPUT: list[dict[str, Any]] = [
    {"if": _input_is("points"), "then": _filtration_of(("rips",))},
    {"if": _input_is("labelled_points"), "then": _graph_filtration(("rips", "dowker"))},
    {"if": _input_is("image"), "then": _filtration_of(("cubical",))},
    {
        "if": {**_input_is("mask"), "not": _input_is("mask", skeletonize=True)},
        "then": _filtration_of(MASK_FILTRATIONS),
    },
    {"if": _input_is("diagrams"), "then": {"properties": {"filtration": {"type": "null"}}}},
    {"if": _input_is("graph"), "then": _graph_filtration(GRAPH_FILTRATIONS)},
    {"if": _input_is("mask", skeletonize=True), "then": _graph_filtration(_SKELETON_FILTRATIONS)},
]
"""Which filtration each input takes, as the OpenAPI document states it (the input kinds in
``workers.spec.kinds`` check the same; tests/spec/test_openapi.py holds the two together)."""

_GRAPH_INPUTS = [_input_is("graph"), _input_is("mask", skeletonize=True)]


def _output_needs(output: str, inputs: list[dict[str, Any]]) -> dict[str, Any]:
    """JSON Schema: a request whose output holds ``output`` has one of ``inputs``."""
    return {
        "if": {"required": ["output"], "properties": {"output": {"contains": {"const": output}}}},
        "then": {"anyOf": inputs},
    }


_OUTPUT_RULES: list[dict[str, Any]] = [
    _output_needs("graph", _GRAPH_INPUTS),
    _output_needs("descriptors", [*_GRAPH_INPUTS, _input_is("labelled_points")]),
    {
        "if": {"required": ["descriptors"], "properties": {"descriptors": {"type": "object"}}},
        "then": {
            "required": ["output"],
            "properties": {"output": {"contains": {"const": "descriptors"}}},
        },
    },
]
"""The rules of ``output_errors`` the document states: output "graph" needs a graph (a graph
input or a skeletonized mask), "descriptors" a graph or labelled points; descriptor options
need "descriptors" in output."""

_FILTRATION_RULES: dict[str, Any] = {"allOf": _FILTRATION_BY_INPUT + _OUTPUT_RULES}


class JobRequest(BaseModel):
    """One computation: an input, the filtration to build on it (none for given diagrams), and
    the feature vectors to make of the diagrams."""

    model_config = ConfigDict(extra="forbid", json_schema_extra=_FILTRATION_RULES)

    input: Input
    filtration: Annotated[
        Filtration | None,
        Field(
            description='Required by "points" (rips), "image" (cubical) and "mask" '
            '(distance, height or radial) inputs; left out for "diagrams"; for '
            '"labelled_points" (rips or dowker), "graph" inputs (height, radial, geodesic or '
            'attribute) and masks with "skeletonize" (height, radial or geodesic) required '
            'unless "output" leaves out "diagrams".'
        ),
    ] = None
    features: Annotated[
        list[FeatureItem],
        Field(
            description="Vectorisations, each of one homology dimension; the result lists "
            "their vectors in this order. At most `limits.max_features` of /v1/capabilities.",
        ),
    ] = []
    output: Annotated[
        list[OutputKind],
        Field(
            min_length=1,
            max_length=3,
            json_schema_extra={"uniqueItems": True},
            description='What the result holds: "diagrams" (the persistence diagrams and '
            'feature vectors), "descriptors" (network descriptors of graph inputs and '
            'skeletonized masks; cell mixing of labelled points) and "graph" (the nodes and '
            "edges the job worked on, graphs and skeletonized masks only). A job that asks "
            "only for descriptors or the graph needs no filtration.",
        ),
    ] = ["diagrams"]
    descriptors: Annotated[
        DescriptorOptions | None,
        Field(
            description='How to measure the descriptors (with output "descriptors"): '
            "direction and shells for graphs, radii for labelled points."
        ),
    ] = None

    def references(self) -> list[tuple[int, str]]:
        """(position, spec_id) of every feature given only by the id of a registered spec."""
        return [
            (index, item.spec_id)
            for index, item in enumerate(self.features)
            if isinstance(item, SpecReference)
        ]

    def filtration_name(self) -> str:
        """The filtration's type, or "none", for descriptions of the job."""
        return self.filtration.type if self.filtration else "none"

    def specs(self) -> list[FeatureSpec]:
        """The feature specs, each with its spec_id set (references must be resolved)."""
        specs: list[FeatureSpec] = []
        for item in self.features:
            if isinstance(item, SpecReference):
                raise ValueError("resolve feature references before asking for specs")
            specs.append(item.model_copy(update={"spec_id": spec_id_of(item)}))
        return specs

    def with_features(self, resolved: dict[int, FeatureSpec]) -> "JobRequest":
        """This request with the features at the given positions replaced by full specs."""
        features = [resolved.get(index, item) for index, item in enumerate(self.features)]
        return self.model_copy(update={"features": features})


def length_error(spec: FeatureSpec, where: str, limits: Limits) -> FieldError | None:
    """A FieldError at the field that sets the length of ``spec`` when it is over the limit."""
    length = vector_length(spec)
    if length <= limits.max_vector_length:
        return None
    return FieldError(
        pointer=f"{where}/{_SIZE_FIELD.get(type(spec), 'quantiles')}",
        message=f"this feature has {length} values, above the vector length limit of "
        f"{limits.max_vector_length}",
    )


def output_errors(
    request: JobRequest, *, on_graph: bool, labelled: bool = False
) -> list[FieldError]:
    """What is wrong with the outputs asked for; ``on_graph``: the job works on a graph (a
    graph input or a skeletonized mask); ``labelled``: on labelled points, which have
    descriptors of their own (cell mixing) but no graph."""
    errors = []
    if len(set(request.output)) != len(request.output):
        errors.append(FieldError(pointer="/output", message="each output is named once"))
    offered = {"diagrams", "descriptors"} if labelled else {"diagrams"}
    graph_only = [kind for kind in request.output if kind not in offered]
    if graph_only and not on_graph:
        errors.append(
            FieldError(
                pointer="/output",
                message=f'output "{graph_only[0]}" is for graphs: send a "graph" input, or '
                'a "mask" with "skeletonize": true',
            )
        )
    if request.descriptors is not None and "descriptors" not in request.output:
        errors.append(
            FieldError(
                pointer="/descriptors",
                message='descriptor options need "descriptors" in output',
            )
        )
    if (on_graph or labelled) and request.filtration is None and "diagrams" in request.output:
        errors.append(
            FieldError(
                pointer="/filtration",
                message="diagrams need a filtration, e.g. "
                + ('{"type": "rips"}' if labelled else '{"type": "height", "direction": [0, 1]}')
                + '; for descriptors alone send "output": ["descriptors"]',
            )
        )
    return errors


def feature_errors(
    request: JobRequest, computed: set[int], limits: Limits, copies: int
) -> list[FieldError]:
    """What is wrong with the features of ``request``: dimensions the job does not compute
    (``computed``), spec ids that do not match, vectors over the length limit (``copies``:
    how many times each feature repeats, once per direction)."""
    if len(request.features) > limits.max_features:
        return [
            FieldError(
                pointer="/features",
                message=f"{len(request.features)} features is above this server's limit of "
                f"{limits.max_features} per job",
            )
        ]
    errors: list[FieldError] = []
    total = 0
    for index, item in enumerate(request.features):
        if isinstance(item, SpecReference):
            raise ValueError("resolve feature references before checking the request")
        where = f"/features/{index}"
        if item.dim not in computed:
            source = "the filtration computes" if request.filtration else "the input gives"
            errors.append(
                FieldError(
                    pointer=f"{where}/dim",
                    message=f"dimension {item.dim} is not among the dimensions {source} "
                    f"({', '.join(map(str, sorted(computed))) or 'none'})",
                )
            )
        mismatch = spec_id_mismatch(item, f"{where}/spec_id")
        if mismatch is not None:
            errors.append(mismatch)
        total += vector_length(item) * copies
        too_long = length_error(item, where, limits)
        if too_long is not None:
            errors.append(too_long)
    if total > limits.max_vector_length and not errors:
        errors.append(
            FieldError(
                pointer="/features",
                message=f"the features have {total} values together"
                + (f" ({copies} directions)" if copies > 1 else "")
                + f", above the vector length limit of {limits.max_vector_length}",
            )
        )
    return errors
