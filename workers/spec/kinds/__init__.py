"""Input kinds: what each kind of input means, one module each, named in one table.

A kind says how its input is checked against the filtration and outputs asked of it
(``check``), how it travels to a worker (``stored``: one array, and the fields of the task
particular to the kind) and which module of ``workers.jobs`` computes it (``worker``: a
dotted name, so the API process never imports the numerical code). ``KINDS`` is the one
dispatch table. Adding an input kind: its model in ``workers.spec.inputs``, a module here,
and one line in ``KINDS``.
"""

from typing import Any

from workers.spec.capabilities import Limits
from workers.spec.filtrations import HeightFiltration
from workers.spec.kinds.base import (
    Checked,
    GraphArrays,
    InputData,
    InputKind,
    LabelledPoints,
    Stored,
)
from workers.spec.kinds.diagrams import DiagramsKind
from workers.spec.kinds.graphs import GraphKind
from workers.spec.kinds.labelled_points import LabelledPointsKind
from workers.spec.kinds.pixels import ImageKind, MaskKind
from workers.spec.kinds.points import PointsKind
from workers.spec.problems import FieldError
from workers.spec.requests import JobRequest, feature_errors, output_errors

__all__ = [
    "KINDS",
    "Checked",
    "GraphArrays",
    "InputData",
    "InputKind",
    "LabelledPoints",
    "Stored",
    "kind_of",
    "request_errors",
]

KINDS: dict[str, InputKind[Any]] = {
    kind.type: kind
    for kind in (
        PointsKind(),
        LabelledPointsKind(),
        DiagramsKind(),
        ImageKind(),
        MaskKind(),
        GraphKind(),
    )
}
"""Every input kind by its ``type`` (the tag of the input in a request, and the stored type
of its array)."""


def kind_of(input_type: str) -> InputKind[Any]:
    """The kind of an input ``type`` (KeyError for a type no kind has)."""
    return KINDS[input_type]


def request_errors(
    request: JobRequest, limits: Limits, data: InputData | None = None, uploaded: bool = False
) -> list[FieldError]:
    """Checks of a job request that span several fields or depend on configured limits.

    Pydantic validates each field on its own; what only makes sense together (all rows of
    one length, a subsample no larger than the set, features of computed dimensions, the
    configured limits) is checked here, by the input's kind. Features given by reference must
    have been resolved (``JobRequest.with_features``) before. ``data`` is the array of an
    image or mask input, or the arrays of a graph (from ``InputKind.data`` or an upload;
    ``uploaded`` says which).
    """
    kind = kind_of(request.input.type)
    errors = output_errors(
        request,
        on_graph=kind.on_graph(request.input),
        labelled=request.input.type == "labelled_points",
    )
    if errors:
        return errors
    checked = kind.check(request, data, uploaded, limits)
    if checked.dims is None:
        return checked.errors
    copies = 1
    if isinstance(request.filtration, HeightFiltration):
        copies = request.filtration.direction_count()  # the features repeat per direction
    return checked.errors + feature_errors(request, checked.dims, limits, copies)
