"""Validated requests turned into what the queue stores: an input array and a task.

The array travels next to the job as .npy bytes; the task (small JSON) travels on the queue.
``described`` is the request as hashed for provenance: the array is replaced by its hash;
``sent`` is the request as the client sent it, for the job page (``request_as_sent``).
"""

import json
from dataclasses import dataclass
from typing import Any

import numpy as np

from service.errors import RequestInvalid
from workers.spec import DistanceRequest, DistanceTask, FieldError, JobRequest, PersistenceTask
from workers.spec.arrays import diagram_rows, result_array
from workers.spec.distances import DEFAULT_DIRECTIONS, DIAGRAM_METRICS, NeverDying
from workers.spec.features import PersistenceImageSpec
from workers.spec.jobs import JobPayload, StoredInput, StoredType
from workers.spec.kinds import InputData, kind_of
from workers.spec.plots import PAIR_KINDS, PlotQuery, PlotTask
from workers.spec.results import Diagram

__all__ = [
    "SENT_REQUEST_BYTES",
    "Submission",
    "job_submission",
    "distance_submission",
    "plot_submission",
    "request_as_sent",
]

SENT_REQUEST_BYTES = 16_384
"""Most bytes of the request kept as sent (its JSON text, large arrays already shortened)."""

_ARRAY_SHOWN_ITEMS = 24
"""Arrays (nested lists of numbers) with more numbers become a placeholder with their shape."""

_ITEMS_SHOWN = 32
"""Longer lists of objects or strings show their first items and how many more there are."""

_TEXT_SHOWN_CHARS = 300
"""Longer strings are cut."""


@dataclass(frozen=True)
class Submission:
    """One job ready for the queue."""

    array: np.ndarray
    input_type: StoredType
    units: str | None
    task: PersistenceTask | DistanceTask | PlotTask
    described: dict[str, Any]
    description: str
    sent: dict[str, str] | None = None
    """The request as the client sent it (``request_as_sent``); None for the API's own jobs."""


def request_as_sent(body: Any, media_type: str) -> dict[str, str]:
    """The JSON ``body`` of a request (a multipart request's ``request`` part) as the client
    sent it, defaults not filled in: its media type and its indented JSON text, each array of
    more than ``_ARRAY_SHOWN_ITEMS`` numbers replaced by its shape, such as
    ``"<5000 × 2 array; see Input SHA-256>"`` (the page's hash of the stored input), cut at
    ``SENT_REQUEST_BYTES``."""
    text = _indented(_shortened(body))
    raw = text.encode("utf-8")
    if len(raw) > SENT_REQUEST_BYTES:
        cut = raw[:SENT_REQUEST_BYTES].decode("utf-8", errors="ignore")
        text = f"{cut}\n... (cut at {SENT_REQUEST_BYTES} bytes)"
    return {"media_type": media_type, "text": text}


def _indented(value: Any, depth: int = 0) -> str:
    """Indented JSON with each list of scalars on one line."""
    inner = " " * (depth + 1)
    if isinstance(value, dict) and value:
        items = [f"{inner}{json.dumps(k)}: {_indented(v, depth + 1)}" for k, v in value.items()]
    elif isinstance(value, list) and any(isinstance(item, dict | list) for item in value):
        items = [inner + _indented(item, depth + 1) for item in value]
    else:
        return json.dumps(value, ensure_ascii=False)
    opening, closing = ("{", "}") if isinstance(value, dict) else ("[", "]")
    return opening + "\n" + ",\n".join(items) + "\n" + " " * depth + closing


def _shortened(value: Any) -> Any:
    if isinstance(value, dict):
        return {key: _shortened(item) for key, item in value.items()}
    if isinstance(value, str):
        if len(value) <= _TEXT_SHOWN_CHARS:
            return value
        return value[:_TEXT_SHOWN_CHARS] + f"... ({len(value)} characters)"
    if not isinstance(value, list):
        return value
    if _more_items_than(value, _ARRAY_SHOWN_ITEMS):
        shape = _array_shape(value)
        if shape is not None:
            return f"<{shape} array; see Input SHA-256>"
    shown = [_shortened(item) for item in value[:_ITEMS_SHOWN]]
    if len(value) > _ITEMS_SHOWN:
        shown.append(f"<... {len(value) - _ITEMS_SHOWN} more items>")
    return shown


_END = object()
"""End of a list, for ``_more_items_than``."""


def _more_items_than(value: list[Any], limit: int) -> bool:
    """Does ``value`` hold more than ``limit`` items, counted through nested lists? Walks at
    most ``limit + 1`` of them: the cost does not grow with the array."""
    count = 0
    pending = [iter(value)]  # depth first: a row is counted before the next one is looked at
    while pending:
        item = next(pending[-1], _END)
        if item is _END:
            pending.pop()
        elif isinstance(item, list):
            pending.append(iter(item))
        else:
            count += 1
            if count > limit:
                return True
    return False


def _array_shape(array: list[Any]) -> str | None:
    """``"5000 × 2"`` for rows of equal length holding numbers, ``"5000-item"`` for ragged
    rows; None when the first item at the bottom is a string, an object or a boolean (not
    an array). Only the lengths of rows are read, never each number: a million points cost
    one pass over their rows."""
    shape = [len(array)]
    level = array
    while level and isinstance(level[0], list):
        try:
            widths = set(map(len, level))  # a list, string or object: a valid request's rows
        except TypeError:  # a number beside lists: not an array
            return None
        if len(widths) != 1:
            return f"{len(array)}-item"
        shape.append(widths.pop())
        if not shape[-1] or not isinstance(level[0][0], list):
            level = level[0]
            break
        level = [item for row in level for item in row]
    first = level[0] if level else 0
    if isinstance(first, bool) or not isinstance(first, int | float | None):
        return None
    return " × ".join(str(size) for size in shape)


def job_submission(
    request: JobRequest,
    data: InputData | None = None,
    uploaded: bool = False,
    body: Any = None,
) -> Submission:
    """A ``POST /v1/jobs`` request (feature references already resolved); ``data`` is the
    array of an image or mask input, or the arrays of a graph, checked, from JSON or an
    upload (``uploaded``); ``body`` is the JSON the client sent (the request part of an
    upload)."""
    kind = kind_of(request.input.type)
    specs = request.specs()
    # The data fields are left out of the dump (a million edges cost a second to dump) and
    # written as null: the request is hashed without them, its input hash stands for them.
    described = request.model_dump(mode="json", exclude={"input": set(kind.data_fields)})
    described["input"].update(dict.fromkeys(kind.data_fields))
    described["features"] = [spec.model_dump(mode="json") for spec in specs]
    stored = kind.stored(request, data, uploaded)
    described["input"].update(stored.described)
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
        sent=None
        if body is None
        else request_as_sent(body, "multipart/form-data" if uploaded else "application/json"),
    )


def distance_submission(
    request: DistanceRequest, results: list[dict[str, Any]] | None, body: Any = None
) -> Submission:
    """A ``POST /v1/distances`` request; ``results`` are those of its job_ids, in order;
    ``body`` is the JSON the client sent."""
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
        job_ids=request.job_ids,
    )
    # The diagrams' units, when every job compared has the same (the matrix's units).
    units = {result.get("units") for result in results or [{}]}
    return Submission(
        array=array,
        input_type=input_type,
        units=units.pop() if len(units) == 1 and diagram_metric else None,
        task=task,
        described=described,
        description=f"{request.metric} between {count} items",
        sent=None if body is None else request_as_sent(body, "application/json"),
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
    payload); RequestInvalid pointing into the query when the job has nothing of that kind.
    min_persistence and top choose the pairs here, so the plot job gets only those."""
    _check_plot_fields(query, result)
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
    if query.kind == "matrix":
        return _matrix_submission(task, result, payload, described, job_id)
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
    rows, caption = _chosen_pairs(query, diagrams, task.units)
    return Submission(
        array=rows,
        input_type="diagrams",
        units=task.units,
        task=task.model_copy(
            update={"dims": [item["dim"] for item in diagrams], "caption": caption}
        ),
        described=described,
        description=f"{query.kind} of job {job_id}",
    )


def _check_plot_fields(query: PlotQuery, result: dict[str, Any]) -> None:
    """RequestInvalid when the kind does not fit the job, or a field does not fit the kind."""
    is_matrix = "matrix" in result
    if (query.kind == "matrix") != is_matrix:
        message = (
            f"the job is a distance matrix; draw it with kind=matrix, not kind={query.kind}"
            if is_matrix
            else "the job has no distance matrix; kind=matrix draws a job of POST /v1/distances"
        )
        raise RequestInvalid([FieldError(pointer="/kind", message=message)])
    unfit = ["dim", "direction"] if is_matrix else []
    if query.kind not in PAIR_KINDS:
        unfit += ["min_persistence", "top"]
    errors = [
        FieldError(pointer=f"/{name}", message=f"{name} does not apply to kind={query.kind}")
        for name in unfit
        if getattr(query, name) is not None
    ]
    if errors:
        raise RequestInvalid(errors)


def _chosen_pairs(
    query: PlotQuery, diagrams: list[dict[str, Any]], units: str | None
) -> tuple[np.ndarray, str | None]:
    """(k, 4) rows (dim, birth, death, row in its diagram) of the pairs ``query`` keeps, and
    the caption saying what was kept; every pair and no caption without a filter."""
    chosen = []
    for item in diagrams:
        rows = diagram_rows([(item["dim"], item["pairs"])])
        rows = np.column_stack([rows, np.arange(len(rows), dtype=np.float64)])
        persistence = rows[:, 2] - rows[:, 1]  # inf for a class that never dies
        if query.min_persistence is not None:
            rows, persistence = (
                rows[persistence >= query.min_persistence],
                persistence[persistence >= query.min_persistence],
            )
        if query.top is not None and len(rows) > query.top:
            # The most persistent first, the earlier pair on a tie; drawn in the result's order.
            kept = np.sort(np.argsort(-persistence, kind="stable")[: query.top])
            rows = rows[kept]
        chosen.append(rows)
    array = np.concatenate(chosen) if chosen else np.empty((0, 4))
    if query.min_persistence is None and query.top is None:
        return array, None
    total = sum(len(item["pairs"]) for item in diagrams)
    rules = []
    if query.min_persistence is not None:
        rules.append(f"persistence ≥ {query.min_persistence:g}{f' {units}' if units else ''}")
    if query.top is not None:
        rules.append(f"top {query.top:,} per dimension")
    return array, f"showing {len(array):,} of {total:,} pairs ({'; '.join(rules)})"


def _matrix_submission(
    task: PlotTask,
    result: dict[str, Any],
    payload: JobPayload,
    described: dict[str, Any],
    job_id: str,
) -> Submission:
    """The heatmap of a distance job's matrix, labelled with its metric and items."""
    matrix = result_array(result)
    if matrix is None:
        raise ValueError(f"job {job_id} has no distance matrix")
    distances = payload.task
    job_ids = distances.job_ids if isinstance(distances, DistanceTask) else None
    metric = str(result["metric"])
    name = f"{metric.replace('_', ' ')} distance"
    if result.get("order") is not None:
        name += f", order {result['order']:g}"
    if result.get("dim") is not None:
        name += f", H{result['dim']}"
    nulls = len(result.get("nulls") or [])
    pairs = result["count"] * (result["count"] - 1) // 2
    return Submission(
        array=matrix,
        input_type="grid",
        units=payload.input.units,
        task=task.model_copy(
            update={
                "units": payload.input.units,
                "value_name": name,
                "labels": [f"{i} · {found[:8]}" for i, found in enumerate(job_ids)]
                if job_ids
                else None,
                "null_meaning": _null_meaning(result),
                "caption": f"{nulls:,} of {pairs:,} distances are null" if nulls else None,
            }
        ),
        described=described,
        description=f"distance matrix of job {job_id}",
    )


_OVERFLOW = "beyond the range of float64"


def _null_meaning(result: dict[str, Any]) -> str:
    """What a null entry of the distance matrix ``result`` means, as its metric and
    never_dying mode make one: only "separate" (the default) gives infinite distances."""
    metric = result["metric"]
    if metric == "cosine":
        return f"undefined: a vector of all zeros has no direction (or {_OVERFLOW})"
    mode = (result.get("never_dying") or {}).get("mode", "separate")
    if metric in DIAGRAM_METRICS and mode == "separate":
        return f"infinite: unequal numbers of classes that never die (or {_OVERFLOW})"
    return _OVERFLOW


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
