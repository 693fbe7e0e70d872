"""Validated requests turned into what the queue stores: an input array and a task.

The array travels next to the job as .npy bytes; the task (small JSON) travels on the queue.
``described`` is the request as hashed for provenance: the array is replaced by its hash.
"""

from dataclasses import dataclass
from typing import Any

import numpy as np

from service.errors import RequestInvalid
from workers.spec import DistanceRequest, DistanceTask, FieldError, JobRequest, PersistenceTask
from workers.spec.arrays import diagram_rows
from workers.spec.distances import DEFAULT_DIRECTIONS, DIAGRAM_METRICS, NeverDying
from workers.spec.features import PersistenceImageSpec
from workers.spec.jobs import JobPayload, StoredInput, StoredType
from workers.spec.kinds import InputData, kind_of
from workers.spec.plots import PlotQuery, PlotTask
from workers.spec.results import Diagram

__all__ = ["Submission", "job_submission", "distance_submission", "plot_submission"]


@dataclass(frozen=True)
class Submission:
    """One job ready for the queue."""

    array: np.ndarray
    input_type: StoredType
    units: str | None
    task: PersistenceTask | DistanceTask | PlotTask
    described: dict[str, Any]
    description: str


def job_submission(
    request: JobRequest, data: InputData | None = None, uploaded: bool = False
) -> Submission:
    """A ``POST /v1/jobs`` request (feature references already resolved); ``data`` is the
    array of an image or mask input, or the arrays of a graph, checked, from JSON or an
    upload (``uploaded``)."""
    kind = kind_of(request.input.type)
    specs = request.specs()
    # The data fields are left out of the dump (a million edges cost a second to dump) and
    # written as null: the request is hashed without them, its input hash stands for them.
    described = request.model_dump(mode="json", exclude={"input": set(kind.data_fields)})
    described["input"].update(dict.fromkeys(kind.data_fields))
    described["features"] = [spec.model_dump(mode="json") for spec in specs]
    stored = kind.stored(request, data, uploaded)
    task = PersistenceTask(
        type="persistence",
        filtration=request.filtration,
        features=specs,
        output=request.output,
        descriptors=request.descriptors,
        **stored.task,
    )
    return Submission(
        array=stored.array,
        input_type=stored.type,
        units=request.input.units,
        task=task,
        described=described,
        description=stored.description,
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
        never_dying=(request.never_dying or NeverDying()) if diagram_metric else None,
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


def plot_submission(
    query: PlotQuery, result: dict[str, Any], payload: JobPayload, job_id: str
) -> Submission:
    """A plot job drawing what ``query`` asks of the succeeded job ``job_id`` (its result and
    payload); RequestInvalid pointing into the query when the job has nothing of that kind."""
    task = PlotTask(
        type="plot",
        kind=query.kind,
        format=query.format,
        width=query.width,
        height=query.height,
        units=result.get("units"),
        value_name=str(result.get("value_convention", "value")).replace("_", " "),
    )
    described = {"plot": query.model_dump(mode="json"), "job_id": job_id}
    if query.kind == "image":
        values, dim, spec = _persistence_image(query, result, payload)
        return Submission(
            array=values,
            input_type="grid",
            units=task.units,
            task=task.model_copy(
                update={
                    "dims": [dim],
                    "birth_range": spec.birth_range,
                    "persistence_range": spec.persistence_range,
                }
            ),
            described=described,
            description=f"persistence image of job {job_id}",
        )
    diagrams = _chosen_diagrams(query, result)
    rows = diagram_rows([(item["dim"], item["pairs"]) for item in diagrams])
    return Submission(
        array=rows,
        input_type="diagrams",
        units=task.units,
        task=task.model_copy(update={"dims": [item["dim"] for item in diagrams]}),
        described=described,
        description=f"{query.kind} of job {job_id}",
    )


def _chosen_diagrams(query: PlotQuery, result: dict[str, Any]) -> list[dict[str, Any]]:
    """The diagrams of the result that ``query`` names (direction, then dimension)."""
    sets = result.get("per_direction") or []
    if sets and query.direction is None:
        raise RequestInvalid(
            [
                FieldError(
                    pointer="/direction",
                    message=f"the job has one diagram set per direction; choose one of "
                    f"0..{len(sets) - 1}",
                )
            ]
        )
    if query.direction is not None and query.direction >= len(sets):
        have = f"0..{len(sets) - 1}" if sets else "none: the job has one diagram set"
        raise RequestInvalid(
            [FieldError(pointer="/direction", message=f"no direction {query.direction} ({have})")]
        )
    diagrams: list[dict[str, Any]] = (
        sets[query.direction]["diagrams"]
        if query.direction is not None
        else result.get("diagrams") or []
    )
    if not diagrams:
        raise RequestInvalid(
            [FieldError(pointer="/kind", message="the job computed no diagrams to draw")]
        )
    if query.dim is None:
        return diagrams
    chosen = [item for item in diagrams if item["dim"] == query.dim]
    if not chosen:
        dims = [item["dim"] for item in diagrams]
        raise RequestInvalid(
            [
                FieldError(
                    pointer="/dim",
                    message=f"the job has no diagram of dimension {query.dim} (it has {dims})",
                )
            ]
        )
    return chosen


def _persistence_image(
    query: PlotQuery, result: dict[str, Any], payload: JobPayload
) -> tuple[np.ndarray, int, PersistenceImageSpec]:
    """The (birth, persistence) grid of the first persistence image ``query`` matches, its
    dimension and its spec."""
    specs = {
        spec.spec_id: spec
        for spec in getattr(payload.task, "features", [])
        if isinstance(spec, PersistenceImageSpec)
    }
    for vector in result.get("vectors") or []:
        spec = specs.get(vector["spec_id"])
        if (
            spec is not None
            and query.dim in (None, vector["dim"])
            and query.direction in (None, vector.get("direction"))
        ):
            values = np.asarray(vector["values"], dtype=np.float64).reshape(vector["shape"])
            return values, vector["dim"], spec
    which = "" if query.dim is None else f" of dimension {query.dim}"
    raise RequestInvalid(
        [
            FieldError(
                pointer="/kind",
                message=f"the job computed no persistence image{which}; ask for one among "
                "its features",
            )
        ]
    )
