"""RQ entry point and the one function that turns a job payload into a result.

``execute`` is what both paths run: inline (tests, benchmarks) and on a worker, where ``run``
fetches the input from Redis and hands ``execute`` to the worker's compute process, which the
worker kills when the job overruns its time limit or is cancelled.
"""

import math
import time
from typing import Any

import numpy as np
from pydantic import ValidationError
from rq import get_current_job
from rq.job import Job

from workers.compute import ComputeProcess, JobAborted, Report, problem_for
from workers.core.diagrams import drop_empty_bars, sort_pairs
from workers.core.errors import ParameterError
from workers.core.rips import rips_diagrams
from workers.core.subsample import maxmin_subsample, random_subsample
from workers.features import direction_feature_vectors, feature_vectors
from workers.graphs import descriptors_of, graph_diagram_sets, graph_output, network_of
from workers.pairwise import distance_matrix, usable_cores
from workers.pictures import picture
from workers.pixel_diagrams import pixel_diagram_sets
from workers.spec import (
    SCHEMA_VERSION,
    Diagram,
    DistanceResult,
    DistanceTask,
    JobPayload,
    JobResult,
    PersistenceTask,
    Problem,
    Provenance,
    RipsFiltration,
    failures,
)
from workers.spec.arrays import array_sha256, diagrams_of_rows, from_npy_bytes
from workers.spec.features import vector_length
from workers.spec.filtrations import ArrayFiltration
from workers.spec.jobs import cancel_key, input_key
from workers.spec.plots import PlotTask
from workers.spec.results import DirectionDiagrams, ValueConvention, package_versions

__all__ = ["execute", "execute_bytes", "run", "compute_process"]

_compute: ComputeProcess | None = None


def _diagram(dim: int, pairs: np.ndarray) -> Diagram:
    return Diagram(
        dim=dim,
        pairs=[(float(b), None if np.isinf(d) else float(d)) for b, d in pairs.tolist()],
    )


def _provenance(payload: JobPayload, started: float, **extra: Any) -> Provenance:
    return Provenance(
        input_sha256=payload.input.sha256,
        request_sha256=payload.request_sha256,
        versions=package_versions(),
        elapsed_s=time.perf_counter() - started,
        **extra,
    )


def _ignore(done: int, total: int) -> None:
    """Progress callback of computations nobody watches."""


def execute(
    payload: JobPayload, array: np.ndarray, *, job_id: str, report: Report = _ignore
) -> dict[str, Any]:
    """Compute the result of one job from its payload and its stored input array."""
    if payload.input.type not in ("image", "mask"):  # images keep their dtype until negated
        array = array.astype(np.float64, copy=False)
    if isinstance(payload.task, DistanceTask):
        return _distances(payload, payload.task, array, job_id, report)
    if isinstance(payload.task, PlotTask):
        return picture(payload.task, array).model_dump(mode="json")
    return _persistence(payload, payload.task, array, job_id)


def _pixel_persistence(
    payload: JobPayload, task: PersistenceTask, array: np.ndarray, job_id: str
) -> dict[str, Any]:
    """Diagrams of an image or mask filtration (one set per direction); then the features."""
    started = time.perf_counter()
    filtration = task.filtration
    if not isinstance(filtration, ArrayFiltration):
        raise TypeError("an image or mask job needs an array filtration")
    sets, convention = pixel_diagram_sets(array, filtration, task.spacing)
    several = sets[0].direction is not None  # a height filtration with "directions"
    _check_pair_count(
        [s.diagrams for s in sets],
        payload.max_result_pairs,
        field="/filtration/directions" if several else "/filtration",
        advice=("ask for fewer directions, " if several else "")
        + "lower max_dim, smooth the image or send a smaller region",
    )
    per_direction = None
    if several:
        named = [(s.direction or [], s.diagrams) for s in sets]
        vectors, layout, layout_id = direction_feature_vectors(task.features, named)
        per_direction = [
            DirectionDiagrams(direction=direction, diagrams=_diagrams(diagrams))
            for direction, diagrams in named
        ]
        diagrams = []
    else:
        vectors, layout, layout_id = feature_vectors(task.features, sets[0].diagrams)
        diagrams = _diagrams(sets[0].diagrams)
    result = JobResult(
        job_id=job_id,
        schema_version=SCHEMA_VERSION,
        value_convention=convention,
        units=_units_of(convention, task, payload.input.units),
        diagrams=diagrams,
        per_direction=per_direction,
        vectors=vectors,
        vector_length=sum(entry.stop - entry.start for entry in layout),
        layout=layout,
        layout_id=layout_id,
        provenance=_provenance(payload, started),
    )
    return result.model_dump(mode="json")


def _check_pair_count(
    diagram_sets: list[dict[int, np.ndarray]], limit: int, *, field: str, advice: str
) -> None:
    """ParameterError when the diagrams hold more pairs than one result may (the cap keeps a
    result under Redis's limit on one value)."""
    pairs = sum(len(pairs) for diagrams in diagram_sets for pairs in diagrams.values())
    if pairs > limit:
        where = f" over {len(diagram_sets)} directions" if len(diagram_sets) > 1 else ""
        raise ParameterError(
            f"the diagrams have {pairs} pairs{where}, above the limit of {limit} per result; "
            + advice,
            field=field,
        )


def _units_of(convention: str, task: PersistenceTask, units: str | None) -> str | None:
    """Pixel values have no unit; lengths have the unit of spacing, or are in pixels."""
    if convention in ("pixel_value", "negated_pixel_value"):
        return None
    return units if task.spacing is not None else "pixel"


def _diagrams(diagrams: dict[int, np.ndarray]) -> list[Diagram]:
    return [_diagram(dim, pairs) for dim, pairs in sorted(diagrams.items())]


def _graph_persistence(
    payload: JobPayload, task: PersistenceTask, array: np.ndarray, job_id: str
) -> dict[str, Any]:
    """Diagrams of a graph filtration (one set per direction), the features, and the network
    descriptors and graph when the output asks for them."""
    started = time.perf_counter()
    network = network_of(
        array, layout=task.graph, skeletonize=task.skeletonize, spacing=task.spacing
    )
    diagrams: list[Diagram] = []
    per_direction = None
    vectors, layout, layout_id = feature_vectors([], {})
    convention: ValueConvention | None = None
    unreached = None
    if task.filtration is not None:
        sets, convention, unreached = graph_diagram_sets(network, task.filtration)
        several = sets[0].direction is not None
        if "diagrams" in task.output:  # only diagrams the result holds count toward its size
            _check_pair_count(
                [s.diagrams for s in sets],
                payload.max_result_pairs,
                field="/filtration/directions" if several else "/filtration",
                advice="ask for fewer directions or lower max_dim",
            )
        if several:
            named = [(s.direction or [], s.diagrams) for s in sets]
            vectors, layout, layout_id = direction_feature_vectors(task.features, named)
            if "diagrams" in task.output:
                per_direction = [
                    DirectionDiagrams(direction=direction, diagrams=_diagrams(found))
                    for direction, found in named
                ]
        else:
            vectors, layout, layout_id = feature_vectors(task.features, sets[0].diagrams)
            if "diagrams" in task.output:
                diagrams = _diagrams(sets[0].diagrams)
    descriptors, shells = (
        descriptors_of(network, task.descriptors) if "descriptors" in task.output else (None, None)
    )
    lengths_unit = payload.input.units
    if task.skeletonize and task.spacing is None:
        lengths_unit = "pixel"
    result = JobResult(
        job_id=job_id,
        schema_version=SCHEMA_VERSION,
        value_convention=convention,
        units=None if convention == "node_value" else lengths_unit,
        diagrams=diagrams,
        per_direction=per_direction,
        vectors=vectors,
        vector_length=sum(entry.stop - entry.start for entry in layout),
        layout=layout,
        layout_id=layout_id,
        descriptors=descriptors,
        shells=shells,
        graph=graph_output(network) if "graph" in task.output else None,
        unreached_nodes=unreached,
        warnings=network.warnings,
        provenance=_provenance(payload, started),
    )
    return result.model_dump(mode="json")


def _persistence(
    payload: JobPayload, task: PersistenceTask, array: np.ndarray, job_id: str
) -> dict[str, Any]:
    """Diagrams of the filtration on a point set, or the given diagrams; then the features."""
    if payload.input.type == "graph" or task.skeletonize:
        return _graph_persistence(payload, task, array, job_id)
    if payload.input.type in ("image", "mask"):
        return _pixel_persistence(payload, task, array, job_id)
    started = time.perf_counter()
    sample = None
    filtration = task.filtration
    if isinstance(filtration, RipsFiltration):  # a point set (n, d)
        points = array
        if filtration.subsample is not None:
            choose = (
                maxmin_subsample if filtration.subsample.method == "maxmin" else random_subsample
            )
            sample = choose(points, size=filtration.subsample.size, seed=filtration.subsample.seed)
            points = points[sample.indices]
        computed = rips_diagrams(points, max_dim=filtration.max_dim, max_edge=filtration.max_edge)
        diagrams = dict(enumerate(computed))
    else:  # given diagrams, rows of (dim, birth, death)
        given = diagrams_of_rows(array, sorted(task.given_dims))
        diagrams = {dim: sort_pairs(drop_empty_bars(pairs)) for dim, pairs in given.items()}
    _check_pair_count(
        [diagrams],
        payload.max_result_pairs,
        field="/filtration" if filtration is not None else "/input/diagrams",
        advice="lower max_dim or max_edge, or subsample"
        if filtration is not None
        else "send fewer pairs",
    )
    vectors, layout, layout_id = feature_vectors(task.features, diagrams)
    result = JobResult(
        job_id=job_id,
        schema_version=SCHEMA_VERSION,
        value_convention="edge_length" if filtration is not None else None,
        units=payload.input.units,
        diagrams=_diagrams(diagrams),
        vectors=vectors,
        vector_length=sum(entry.stop - entry.start for entry in layout),
        layout=layout,
        layout_id=layout_id,
        provenance=_provenance(
            payload,
            started,
            subsample_indices=None if sample is None else sample.indices.tolist(),
            subsample_covering_radius=None if sample is None else sample.covering_radius,
        ),
    )
    return result.model_dump(mode="json")


def _distances(
    payload: JobPayload, task: DistanceTask, array: np.ndarray, job_id: str, report: Report
) -> dict[str, Any]:
    """The distance matrix between the stored diagrams (rows of (index, birth, death)) or
    vectors (N, L)."""
    started = time.perf_counter()
    if payload.input.type == "vectors":
        items: list[np.ndarray] = list(array)
    else:
        by_index = diagrams_of_rows(array, list(range(task.count)))
        items = [by_index[index] for index in range(task.count)]
    matrix, nulls = distance_matrix(items, task, report, processes=usable_cores())
    finite = np.isfinite(matrix)
    diagram_metric = payload.input.type != "vectors"
    result = DistanceResult(
        job_id=job_id,
        schema_version=SCHEMA_VERSION,
        metric=task.metric,
        order=task.order,
        directions=task.directions,
        dim=task.dim,
        ground_metric="l_infinity" if diagram_metric else None,
        count=task.count,
        matrix=[
            [float(v) if ok else None for v, ok in zip(row, oks, strict=True)]
            for row, oks in zip(matrix.tolist(), finite.tolist(), strict=True)
        ],
        nulls=nulls,
        provenance=_provenance(payload, started),
    )
    return result.model_dump(mode="json")


def execute_bytes(header: dict[str, Any], input_bytes: bytes, report: Report) -> dict[str, Any]:
    """Entry used inside the compute child: JSON header and .npy bytes in, result dict out."""
    payload = JobPayload.model_validate(header["payload"])
    array = from_npy_bytes(input_bytes)
    return execute(payload, array, job_id=header["job_id"], report=report)


def compute_process() -> ComputeProcess:
    """This worker's compute child, forked on first use (the runner forks it at start-up)."""
    global _compute
    if _compute is None:
        _compute = ComputeProcess(execute_bytes)
    return _compute


class JobFailed(RuntimeError):
    """Raised so RQ marks the job failed; the problem object is in ``job.meta['problem']``."""


INLINE_MAX_POINTS = 150
"""Rips jobs up to this many points (H0/H1, no subsample) run in the worker itself: they take
at most ~20 ms, far below any time limit, so the compute child's round trip would only
add overhead."""

INLINE_MAX_PAIRS = 5000
"""Jobs on given diagrams up to this many pairs run in the worker itself (features of 5000
pairs take a few ms)..."""

INLINE_MAX_VALUES = 10_000
"""... when their feature vectors have at most this many values together."""


def _checked_input(data: object, payload: JobPayload) -> np.ndarray:
    """The stored array if it is the one the service recorded, else JobAborted."""
    if not isinstance(data, bytes):
        raise JobAborted(failures.input_missing())
    try:
        array = from_npy_bytes(data)
    except ValueError:
        raise JobAborted(failures.input_corrupt()) from None
    if list(array.shape) != payload.input.shape or array_sha256(array) != payload.input.sha256:
        raise JobAborted(failures.input_corrupt())
    return array


INLINE_MAX_PIXELS = 4096
"""Image and mask jobs up to this many pixels run in the worker itself (a few ms)."""

INLINE_MAX_GRAPH_ROWS = 20_000
"""Graph jobs up to this many nodes and edges together run in the worker itself (a few ms;
a height filtration with many directions multiplies that, still far below any limit)."""


def _runs_inline(payload: JobPayload) -> bool:
    """Is this job so small that the compute child's round trip would cost more than it?"""
    task, rows = payload.task, payload.input.shape[0]
    if payload.input.type == "graph":
        return rows <= INLINE_MAX_GRAPH_ROWS
    if payload.input.type in ("image", "mask"):
        return math.prod(payload.input.shape) <= INLINE_MAX_PIXELS
    if isinstance(task, DistanceTask):
        return task.count <= 8 and rows <= 2000
    if isinstance(task, PlotTask):
        return False  # matplotlib stays out of the worker process, in the compute child
    if task.filtration is None:
        values = sum(vector_length(spec) for spec in task.features)
        return rows <= INLINE_MAX_PAIRS and values <= INLINE_MAX_VALUES
    filtration = task.filtration
    return (
        isinstance(filtration, RipsFiltration)
        and rows <= INLINE_MAX_POINTS
        and filtration.max_dim <= 1
        and filtration.subsample is None
    )


def _save_progress(job: Job, done: int, total: int) -> None:
    job.meta["progress"] = {"done": done, "total": total}
    job.save_meta()


def run(raw_payload: dict[str, Any]) -> dict[str, Any]:
    """RQ job: read the input saved next to the job, compute in the killable child, return."""
    job = get_current_job()
    if job is None:
        raise RuntimeError("workers.jobs.run must run inside an RQ worker")
    connection = job.connection
    try:
        try:
            payload = JobPayload.model_validate(raw_payload)
        except ValidationError as error:
            raise JobAborted(failures.payload_invalid(f"{error.error_count()} errors")) from None
        # One round trip: was it cancelled while a worker was taking it, and its input
        # (taken out of Redis at once: from here on it lives in this process only).
        pipe = connection.pipeline()
        pipe.exists(cancel_key(job.id))
        pipe.getdel(input_key(job.id))
        cancelled, stored = pipe.execute()
        if cancelled:
            raise JobAborted(failures.cancelled())
        array = _checked_input(stored, payload)
        if _runs_inline(payload):
            try:
                return execute(payload, array, job_id=job.id)
            except Exception as error:
                raise JobAborted(problem_for(error)) from None
        assert isinstance(stored, bytes)  # _checked_input refused anything else
        return compute_process().run(
            job_id=job.id,
            payload=payload,
            input_bytes=stored,
            time_limit_s=payload.time_limit_s,
            should_stop=lambda: bool(connection.exists(cancel_key(job.id))),
            on_progress=lambda done, total: _save_progress(job, done, total),
        )
    except JobAborted as aborted:
        connection.delete(input_key(job.id))  # if the payload was refused before GETDEL
        problem: Problem = aborted.problem
        job.meta["problem"] = problem.model_dump(mode="json", exclude_none=True)
        job.save_meta()
        raise JobFailed(problem.detail or problem.title) from None
