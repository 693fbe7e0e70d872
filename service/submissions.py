"""Validated requests turned into what the queue stores: an input array and a task.

The array travels next to the job as .npy bytes; the task (small JSON) travels on the queue.
``described`` is the request as hashed for provenance: the array is replaced by its hash.
"""

from dataclasses import dataclass
from typing import Any

import numpy as np

from service.errors import RequestInvalid
from workers.spec import (
    DistanceRequest,
    DistanceTask,
    FieldError,
    JobRequest,
    PersistenceTask,
    PointsInput,
)
from workers.spec.arrays import diagram_rows
from workers.spec.distances import DEFAULT_DIRECTIONS, DIAGRAM_METRICS
from workers.spec.graphs import GraphArrays, graph_rows, layout_of
from workers.spec.inputs import GraphInput, ImageInput, MaskInput
from workers.spec.jobs import StoredInput, StoredType
from workers.spec.requests import InputData
from workers.spec.results import Diagram

__all__ = ["Submission", "job_submission", "distance_submission"]


@dataclass(frozen=True)
class Submission:
    """One job ready for the queue."""

    array: np.ndarray
    input_type: StoredType
    units: str | None
    task: PersistenceTask | DistanceTask
    described: dict[str, Any]
    description: str


_ARRAY_FIELDS = {
    "points": ("points",),
    "diagrams": ("diagrams",),
    "image": ("values",),  # null for JSON values and uploads alike: the same hash
    "mask": ("values",),
    "graph": ("nodes", "edges", "radius", "length"),  # the same for JSON and GraphML
}
"""Fields of each input type that hold its data, which the stored array carries."""


def job_submission(
    request: JobRequest, data: InputData | None = None, uploaded: bool = False
) -> Submission:
    """A ``POST /v1/jobs`` request (feature references already resolved); ``data`` is the
    array of an image or mask input, or the arrays of a graph, checked, from JSON or an
    upload (``uploaded``)."""
    specs = request.specs()
    arrays = _ARRAY_FIELDS[request.input.type]
    # The arrays are left out of the dump (a million edges cost a second to dump) and written
    # as null: the request is hashed without them, its input hash stands for them.
    described = request.model_dump(mode="json", exclude={"input": set(arrays)})
    described["input"].update(dict.fromkeys(arrays))
    described["features"] = [spec.model_dump(mode="json") for spec in specs]
    task = PersistenceTask(
        type="persistence",
        filtration=request.filtration,
        features=specs,
        output=request.output,
        descriptors=request.descriptors,
    )
    filtration = request.filtration.type if request.filtration else "none"
    if isinstance(request.input, GraphInput):
        if not isinstance(data, GraphArrays):
            raise ValueError("a graph job needs its checked arrays")
        return Submission(
            array=graph_rows(data),
            input_type="graph",
            units=request.input.units,
            task=task.model_copy(
                update={
                    "graph": layout_of(data, uploaded=uploaded),
                    "spacing": request.input.spacing,
                }
            ),
            described=described,
            description=f"{filtration} on a graph of {len(data.coordinates)} nodes and "
            f"{len(data.edges)} edges",
        )
    if isinstance(request.input, ImageInput | MaskInput):
        pixels = data
        if not isinstance(pixels, np.ndarray):
            raise ValueError("an image or mask job needs its checked array")
        skeleton = isinstance(request.input, MaskInput) and request.input.skeletonize
        return Submission(
            array=pixels,
            input_type=request.input.type,
            units=request.input.units,
            task=task.model_copy(
                update={"spacing": request.input.spacing, "skeletonize": skeleton}
            ),
            described=described,
            description=f"{filtration} on {request.input.type} "
            + " x ".join(map(str, pixels.shape)),
        )
    if isinstance(request.input, PointsInput):
        array = np.asarray(request.input.points, dtype=np.float64)
        return Submission(
            array=array,
            input_type="points",
            units=request.input.units,
            task=task,
            described=described,
            description=f"{filtration} on {array.shape[0]} x {array.shape[1]}",
        )
    array = diagram_rows([(d.dim, d.pairs) for d in request.input.diagrams])
    return Submission(
        array=array,
        input_type="diagrams",
        units=request.input.units,
        task=task.model_copy(update={"given_dims": [d.dim for d in request.input.diagrams]}),
        described=described,
        description=f"features of {len(array)} given pairs",
    )


def distance_submission(
    request: DistanceRequest, results: list[dict[str, Any]] | None
) -> Submission:
    """A ``POST /v1/distances`` request; ``results`` are those of its job_ids, in order."""
    diagram_metric = request.metric in DIAGRAM_METRICS
    described = request.model_dump(mode="json")
    input_type: StoredType
    if results is not None:
        array, input_type = _from_results(request, results, diagram_metric)
    elif request.vectors is not None:
        array, input_type = np.asarray(request.vectors, dtype=np.float64), "vectors"
        described["vectors"] = None
    else:
        items = request.diagrams or []
        pairs = [item.pairs if isinstance(item, Diagram) else item for item in items]
        array, input_type = diagram_rows(list(enumerate(pairs))), "diagram_set"
        described["diagrams"] = None
    count = len(results) if results is not None else len(request.diagrams or request.vectors or [])
    task = DistanceTask(
        type="distances",
        metric=request.metric,
        order=(request.order or 1.0) if request.metric == "wasserstein" else None,
        directions=(request.directions or DEFAULT_DIRECTIONS)
        if request.metric == "sliced_wasserstein"
        else None,
        dim=_dimension_of(request) if diagram_metric else None,
        count=count,
    )
    return Submission(
        array=array,
        input_type=input_type,
        units=None,
        task=task,
        described=described,
        description=f"{request.metric} between {count} items",
    )


def _dimension_of(request: DistanceRequest) -> int | None:
    """The dimension compared: named in the request, or carried by the diagram objects."""
    if request.dim is not None:
        return request.dim
    dims = [item.dim for item in request.diagrams or [] if isinstance(item, Diagram)]
    return dims[0] if dims else None


def _from_results(
    request: DistanceRequest, results: list[dict[str, Any]], diagram_metric: bool
) -> tuple[np.ndarray, StoredType]:
    """The diagrams of dimension ``dim``, or the concatenated vectors, of finished jobs."""
    errors: list[FieldError] = []
    if diagram_metric:
        chosen: list[tuple[int, list[Any]]] = []
        for index, result in enumerate(results):
            found = [d for d in result.get("diagrams", []) if d["dim"] == request.dim]
            if not found and result.get("per_direction"):
                errors.append(
                    FieldError(
                        pointer=f"/job_ids/{index}",
                        message=f"job {result['job_id']} has one diagram set per direction; "
                        "compare its feature vectors, or send the diagrams of one direction",
                    )
                )
                continue
            if not found:
                dims = [d["dim"] for d in result.get("diagrams", [])]
                errors.append(
                    FieldError(
                        pointer=f"/job_ids/{index}",
                        message=f"job {result['job_id']} has no diagram of dimension "
                        f"{request.dim} (it has {dims or 'no diagrams'})",
                    )
                )
                continue
            chosen.append((index, [tuple(pair) for pair in found[0]["pairs"]]))
        if errors:
            raise RequestInvalid(errors)
        return diagram_rows(chosen), "diagram_set"
    rows = []
    first_layout: str | None = None
    for index, result in enumerate(results):
        vectors = result.get("vectors") or []
        if not vectors:
            errors.append(
                FieldError(
                    pointer=f"/job_ids/{index}",
                    message=f"job {result['job_id']} computed no feature vectors",
                )
            )
            continue
        layout = result.get("layout_id")
        if first_layout is None:
            first_layout = layout
        elif layout != first_layout:
            errors.append(
                FieldError(
                    pointer=f"/job_ids/{index}",
                    message=f"job {result['job_id']} has vectors of layout {layout}, the first "
                    f"job of layout {first_layout}; only vectors of one layout compare",
                )
            )
            continue
        rows.append(np.concatenate([np.asarray(v["values"], dtype=np.float64) for v in vectors]))
    if errors:
        raise RequestInvalid(errors)
    return np.stack(rows), "vectors"


def stored_input(submission: Submission, sha256: str) -> StoredInput:
    """How the payload describes the stored array."""
    return StoredInput(
        type=submission.input_type,
        shape=list(submission.array.shape),
        sha256=sha256,
        units=submission.units,
    )
