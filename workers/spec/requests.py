"""The bodies of ``POST /v1/jobs`` and their checks that span several fields."""

from typing import Annotated

import numpy as np
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
from workers.spec.filtrations import Filtration, HeightFiltration, RipsFiltration
from workers.spec.graphs import (
    GraphArrays,
    graph_arrays,
    graph_errors,
    graph_filtration_errors,
    graph_max_dim,
)
from workers.spec.inputs import (
    ArrayInput,
    DiagramsInput,
    GraphInput,
    ImageInput,
    Input,
    MaskInput,
    PointsInput,
)
from workers.spec.networks import DescriptorOptions, OutputKind
from workers.spec.pixels import UPLOAD_POINTER, array_of_values, max_dim_of, pixel_errors
from workers.spec.problems import FieldError

__all__ = ["InputData", "JobRequest", "MAX_FEATURES", "length_error", "pair_errors"]

InputData = np.ndarray | GraphArrays
"""The data of an input that comes as arrays: pixels, or a graph."""

MAX_FEATURES = 64
"""Most feature specs one job may ask for."""

_SIZE_FIELD = {
    PersistenceImageSpec: "resolution",
    LandscapeSpec: "samples",
    BettiCurveSpec: "samples",
}
"""The field that sets a spec's vector length, pointed at when it is too long."""


class JobRequest(BaseModel):
    """One computation: an input, the filtration to build on it (none for given diagrams), and
    the feature vectors to make of the diagrams."""

    model_config = ConfigDict(extra="forbid")

    input: Input
    filtration: Filtration | None = None
    features: Annotated[
        list[FeatureItem],
        Field(
            max_length=MAX_FEATURES,
            description="Vectorisations, each of one homology dimension; the result lists "
            "their vectors in this order.",
        ),
    ] = []
    output: Annotated[
        list[OutputKind],
        Field(
            min_length=1,
            max_length=3,
            description='What the result holds: "diagrams" (the persistence diagrams and '
            'feature vectors), "descriptors" (network descriptors) and "graph" (the nodes '
            'and edges the job worked on); the last two for graph inputs and skeletonized '
            "masks. A graph job that asks only for descriptors or the graph needs no "
            "filtration.",
        ),
    ] = ["diagrams"]
    descriptors: Annotated[
        DescriptorOptions | None,
        Field(description='How to measure the network descriptors (with output "descriptors").'),
    ] = None

    def references(self) -> list[tuple[int, str]]:
        """(position, spec_id) of every feature given only by the id of a registered spec."""
        return [
            (index, item.spec_id)
            for index, item in enumerate(self.features)
            if isinstance(item, SpecReference)
        ]

    def field_errors(
        self, limits: Limits, data: InputData | None = None, uploaded: bool = False
    ) -> list[FieldError]:
        """Checks that span several fields or depend on configured limits.

        Pydantic validates each field on its own; what only makes sense together (all rows of
        one length, a subsample no larger than the set, features of computed dimensions, the
        configured limits) is checked here. Features given by reference must have been
        resolved (``with_features``) before. ``data`` is the array of an image or mask input,
        or the arrays of a graph (from ``input_data`` or an upload; ``uploaded`` says which).
        """
        computed: set[int]
        errors = self._output_errors()
        if errors:
            return errors
        if isinstance(self.input, PointsInput):
            if self.filtration is not None and not isinstance(self.filtration, RipsFiltration):
                return [
                    FieldError(
                        pointer="/filtration/type",
                        message=f'a point set takes the "rips" filtration, not '
                        f'"{self.filtration.type}"',
                    )
                ]
            errors = self._points_errors(self.input, limits)
            computed = set(range(self.filtration.max_dim + 1)) if self.filtration else set()
        elif isinstance(self.input, DiagramsInput):
            errors = self._diagrams_errors(self.input, limits)
            computed = {diagram.dim for diagram in self.input.diagrams}
        elif isinstance(self.input, GraphInput):
            errors = self._graph_errors(self.input, data, uploaded, limits)
            if errors:
                return errors
            computed = set(range(graph_max_dim(self.filtration) + 1)) if self.filtration else set()
        else:
            pixels = data if isinstance(data, np.ndarray) else None
            errors = self._array_errors(self.input, pixels, uploaded, limits)
            if errors:
                return errors
            assert pixels is not None  # else errors said so
            if self._on_graph():
                errors = graph_filtration_errors(
                    self.filtration, pixels.ndim, None, self.descriptors, limits
                )
                if errors:
                    return errors
                computed = (
                    set(range(graph_max_dim(self.filtration) + 1)) if self.filtration else set()
                )
            else:
                assert self.filtration is not None  # else errors said so
                computed = set(range(max_dim_of(self.filtration, pixels.ndim) + 1))
        copies = 1
        if isinstance(self.filtration, HeightFiltration):
            copies = self.filtration.direction_count()  # the features repeat per direction
        return errors + self._feature_errors(computed, limits, copies)

    def input_data(self) -> InputData | FieldError | None:
        """The array of an image or mask given as JSON values, or the arrays of a graph given
        as JSON (None for other inputs and for data to be uploaded), or a FieldError at the
        first ragged row."""
        if isinstance(self.input, ImageInput | MaskInput) and self.input.values is not None:
            return array_of_values(self.input.values)
        if isinstance(self.input, GraphInput) and self.input.nodes is not None:
            return graph_arrays(self.input)
        return None

    def _on_graph(self) -> bool:
        """Does the job work on a graph (a graph input or a skeletonized mask)?"""
        return isinstance(self.input, GraphInput) or (
            isinstance(self.input, MaskInput) and self.input.skeletonize
        )

    def _output_errors(self) -> list[FieldError]:
        errors = []
        if len(set(self.output)) != len(self.output):
            errors.append(FieldError(pointer="/output", message="each output is named once"))
        graph_only = [kind for kind in self.output if kind != "diagrams"]
        if graph_only and not self._on_graph():
            errors.append(
                FieldError(
                    pointer="/output",
                    message=f'output "{graph_only[0]}" is for graphs: send a "graph" input, or '
                    'a "mask" with "skeletonize": true',
                )
            )
        if self.descriptors is not None and "descriptors" not in self.output:
            errors.append(
                FieldError(
                    pointer="/descriptors",
                    message='descriptor options need "descriptors" in output',
                )
            )
        if self._on_graph() and self.filtration is None and "diagrams" in self.output:
            errors.append(
                FieldError(
                    pointer="/filtration",
                    message='diagrams need a filtration, e.g. {"type": "height", "direction": '
                    '[0, 1]}; for descriptors alone send "output": ["descriptors"]',
                )
            )
        return errors

    def _graph_errors(
        self, graph_input: GraphInput, data: InputData | None, uploaded: bool, limits: Limits
    ) -> list[FieldError]:
        if uploaded and graph_input.nodes is not None:
            return [
                FieldError(
                    pointer="/input/nodes",
                    message="the graph is both in nodes and uploaded as the data part; send it "
                    "one way",
                )
            ]
        if not isinstance(data, GraphArrays):
            return [
                FieldError(
                    pointer="/input/nodes",
                    message="give the graph as nodes and edges, or upload GraphML as the data "
                    "part of a multipart/form-data request",
                )
            ]
        if uploaded:
            for name in ("edges", "radius", "length"):
                if getattr(graph_input, name) is not None:
                    return [
                        FieldError(
                            pointer=f"/input/{name}",
                            message=f"an uploaded graph carries its own {name}; leave it out "
                            "of the request part",
                        )
                    ]
        return graph_errors(data, graph_input, self.filtration, self.descriptors, limits, uploaded)

    def _array_errors(
        self, array_input: ArrayInput, pixels: np.ndarray | None, uploaded: bool, limits: Limits
    ) -> list[FieldError]:
        if uploaded and array_input.values is not None:
            return [
                FieldError(
                    pointer="/input/values",
                    message="the array is both in values and uploaded as the data part; send "
                    "it one way",
                )
            ]
        if pixels is None:
            return [
                FieldError(
                    pointer="/input/values",
                    message="give the array as values (nested lists), or upload it as the "
                    "data part of a multipart/form-data request",
                )
            ]
        where = UPLOAD_POINTER if uploaded else "/input/values"
        return pixel_errors(pixels, array_input, self.filtration, limits, where)

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

    def _points_errors(self, points_input: PointsInput, limits: Limits) -> list[FieldError]:
        points = points_input.points
        width = len(points[0])
        for row, coordinates in enumerate(points):
            if len(coordinates) != width:
                return [
                    FieldError(
                        pointer=f"/input/points/{row}",
                        message=f"row {row} has {len(coordinates)} coordinates, row 0 has {width};"
                        " every row needs the same number",
                    )
                ]
        if self.filtration is None:
            return [
                FieldError(
                    pointer="/filtration",
                    message='a point set needs a filtration, e.g. {"type": "rips", "max_dim": 1}',
                )
            ]
        assert isinstance(self.filtration, RipsFiltration)  # field_errors checked
        errors: list[FieldError] = []
        n = len(points)
        subsample = self.filtration.subsample
        if n > limits.max_input_points:
            errors.append(
                FieldError(
                    pointer="/input/points",
                    message=f"{n} points is above the limit of {limits.max_input_points} "
                    "per request",
                )
            )
        elif subsample is None and n > limits.max_points:
            errors.append(
                FieldError(
                    pointer="/input/points",
                    message=f"{n} points is above the Rips limit of {limits.max_points}; send "
                    f'"filtration": {{"subsample": {{"method": "maxmin", "size": '
                    f"{limits.max_points}}}}} to reduce the set first",
                )
            )
        if subsample is not None:
            if subsample.size > n:
                errors.append(
                    FieldError(
                        pointer="/filtration/subsample/size",
                        message=f"subsample size {subsample.size} is larger than the {n} points",
                    )
                )
            elif subsample.size > limits.max_points:
                errors.append(
                    FieldError(
                        pointer="/filtration/subsample/size",
                        message=f"subsample size {subsample.size} is above the Rips limit of "
                        f"{limits.max_points}",
                    )
                )
        if self.filtration.max_dim > limits.max_dim:
            errors.append(
                FieldError(
                    pointer="/filtration/max_dim",
                    message=f"max_dim {self.filtration.max_dim} is above this server's limit of "
                    f"{limits.max_dim}",
                )
            )
        return errors

    def _diagrams_errors(self, given: DiagramsInput, limits: Limits) -> list[FieldError]:
        errors: list[FieldError] = []
        if self.filtration is not None:
            errors.append(
                FieldError(
                    pointer="/filtration",
                    message="given diagrams take no filtration; leave it out",
                )
            )
        seen: set[int] = set()
        total = 0
        for index, diagram in enumerate(given.diagrams):
            if diagram.dim in seen:
                errors.append(
                    FieldError(
                        pointer=f"/input/diagrams/{index}/dim",
                        message=f"dimension {diagram.dim} is given twice; send one diagram per "
                        "dimension",
                    )
                )
            seen.add(diagram.dim)
            total += len(diagram.pairs)
            errors.extend(pair_errors(diagram.pairs, f"/input/diagrams/{index}/pairs"))
        if total > limits.max_input_points:
            errors.append(
                FieldError(
                    pointer="/input/diagrams",
                    message=f"{total} pairs is above the limit of {limits.max_input_points} "
                    "per request",
                )
            )
        return errors

    def _feature_errors(
        self, computed: set[int], limits: Limits, copies: int
    ) -> list[FieldError]:
        errors: list[FieldError] = []
        total = 0
        for index, item in enumerate(self.features):
            if isinstance(item, SpecReference):
                raise ValueError("resolve feature references before checking the request")
            where = f"/features/{index}"
            if item.dim not in computed:
                source = "the filtration computes" if self.filtration else "the input gives"
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
