"""The one builder of persistence results: what every input kind's worker computes goes
through ``persistence_result`` to become a ``JobResult``.

A kind's worker returns ``Computed``: one diagram set, or one per direction of a height
filtration, what the values are, and the fields particular to the kind (descriptors, the
graph, warnings, the subsample). Here the size of the result is checked, the feature vectors
are made and the diagrams turned into the contract's models, the same way for every kind.
"""

import functools
import time
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, Protocol

import numpy as np

from workers.core.errors import RequestError
from workers.jobs.features import direction_feature_vectors, feature_vectors
from workers.jobs.steps import Steps
from workers.spec import SCHEMA_VERSION, Diagram, JobPayload, JobResult, PersistenceTask
from workers.spec.results import (
    LENGTH_CONVENTIONS,
    DirectionDiagrams,
    Engine,
    ValueConvention,
    engine_packages,
    package_versions,
)

__all__ = ["Computed", "DiagramSet", "KindWorker", "persistence_result", "provenance"]


@dataclass(frozen=True)
class DiagramSet:
    """Diagrams (dimension -> (k, 2) pairs, inf deaths) of one filtration, and its direction
    if it is one of several."""

    diagrams: dict[int, np.ndarray]
    direction: list[float] | None = None


@dataclass(frozen=True)
class Computed:
    """What a kind's worker computed for a persistence task."""

    sets: list[DiagramSet]
    """One set, one per direction, or none (a graph job without a filtration)."""
    convention: ValueConvention | None
    """What the diagram values are (None for given diagrams and no filtration)."""
    coordinate_units: str | None
    """Unit of the coordinates (points, graph nodes after spacing, the pixel grid); the
    values carry it when the convention makes them lengths."""
    engine: Engine | None
    """The method that computed the diagrams (None for given diagrams and no filtration)."""
    limit_pointer: str
    """Where a result with too many pairs points (one set; several point at the directions)."""
    advice: str
    """How to make such a result smaller."""
    spacing: Sequence[float] | None = None
    """The spacing the job used (image, mask and graph inputs)."""
    given_units: str | None = None
    """Unit of given diagrams' values, as the client sent it."""
    packages: tuple[str, ...] = ()
    """Distributions the job ran on beyond the base ones and its engine's."""
    diagrams_kept: bool = True
    """Does the result hold the diagrams (a graph job may ask for descriptors only)?"""
    fields: Mapping[str, Any] = field(default_factory=dict)
    """Fields of the JobResult particular to the kind."""
    provenance: Mapping[str, Any] = field(default_factory=dict)
    """Fields of the Provenance particular to the kind."""


class KindWorker(Protocol):
    """A ``workers.jobs`` module that computes one kind of input (``InputKind.worker``)."""

    def compute(
        self, payload: JobPayload, task: PersistenceTask, array: np.ndarray, steps: Steps
    ) -> Computed:
        """The diagram sets of ``task`` on the stored ``array``; its own steps planned on
        ``steps`` before the first begins."""
        ...

    def runs_inline(self, payload: JobPayload) -> bool:
        """Is the job so small that the compute child's round trip would cost more?"""
        ...


def provenance(
    payload: JobPayload,
    started: float,
    engine: Engine | None,
    packages: Iterable[str] = (),
    **extra: Any,
) -> dict[str, Any]:
    """The provenance fields of every result: input and request hashes, the engine and the
    versions of what it ran on, time, and the id of the request that queued the job."""
    return {
        "input_sha256": payload.input.sha256,
        "request_sha256": payload.request_sha256,
        "versions": package_versions((*engine_packages(engine), *packages)),
        "engine": engine,
        "elapsed_s": time.perf_counter() - started,
        "request_id": payload.request_id,
        **extra,
    }


def persistence_result(
    payload: JobPayload,
    task: PersistenceTask,
    computed: Computed,
    job_id: str,
    started: float,
    steps: Steps,
) -> dict[str, Any]:
    """The JobResult (as JSON) of a persistence task from what its kind's worker computed;
    one step per feature vector, and one for the result."""
    feature_step = functools.partial(steps.begin, "features")
    sets = computed.sets
    several = bool(sets) and sets[0].direction is not None
    if computed.diagrams_kept:  # only diagrams the result holds count toward its size
        _check_pair_count(
            [s.diagrams for s in sets],
            payload.max_result_pairs,
            pointer="/filtration/directions" if several else computed.limit_pointer,
            advice=("ask for fewer directions, " if several else "") + computed.advice,
        )
    diagrams: list[Diagram] = []
    per_direction = None
    if several:
        named = [(s.direction or [], s.diagrams) for s in sets]
        vectors, layout, layout_id = direction_feature_vectors(task.features, named, feature_step)
        if computed.diagrams_kept:
            per_direction = [
                DirectionDiagrams(direction=direction, diagrams=_diagrams(found))
                for direction, found in named
            ]
    else:
        found = sets[0].diagrams if sets else {}
        vectors, layout, layout_id = feature_vectors(task.features, found, feature_step)
        if computed.diagrams_kept:
            diagrams = _diagrams(found)
    steps.begin("result")
    result = JobResult.model_validate(
        {
            "job_id": job_id,
            "schema_version": SCHEMA_VERSION,
            "value_convention": computed.convention,
            "units": _value_units(computed),
            "coordinate_units": computed.coordinate_units,
            "spacing": None if computed.spacing is None else list(computed.spacing),
            "diagrams": diagrams,
            "per_direction": per_direction,
            "vectors": vectors,
            "vector_length": sum(entry.stop - entry.start for entry in layout),
            "layout": layout,
            "layout_id": layout_id,
            **computed.fields,
            "provenance": provenance(
                payload, started, computed.engine, computed.packages, **computed.provenance
            ),
        }
    )
    return result.model_dump(mode="json")


def _value_units(computed: Computed) -> str | None:
    """The unit of the diagram values: the coordinates' when they are lengths, none for pixel
    and node values, the client's for given diagrams."""
    if computed.convention is None:
        return computed.given_units
    return computed.coordinate_units if computed.convention in LENGTH_CONVENTIONS else None


def _check_pair_count(
    diagram_sets: list[dict[int, np.ndarray]], limit: int, *, pointer: str, advice: str
) -> None:
    """RequestError when the diagrams hold more pairs than one result may (the cap keeps a
    result under Redis's limit on one value)."""
    pairs = sum(len(pairs) for diagrams in diagram_sets for pairs in diagrams.values())
    if pairs > limit:
        where = f" over {len(diagram_sets)} directions" if len(diagram_sets) > 1 else ""
        raise RequestError(
            f"the diagrams have {pairs} pairs{where}, above the limit of {limit} per result; "
            + advice,
            field=pointer,
        )


def _diagrams(diagrams: Mapping[int, np.ndarray]) -> list[Diagram]:
    return [
        Diagram(
            dim=dim,
            pairs=[(float(b), None if np.isinf(d) else float(d)) for b, d in pairs.tolist()],
        )
        for dim, pairs in sorted(diagrams.items())
    ]
