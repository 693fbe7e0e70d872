"""Cost estimates of jobs before they are queued: seconds and peak memory from their sizes.

The model is measured, not derived. For each kind of job (Rips by highest dimension, cubical
in 2D and 3D, graphs, given diagrams, one pair of diagrams per metric, a matrix's own time,
vector matrices, whose memory stands for any matrix's own) ``make estimates``
(``tests/benchmarks/costs.py``) runs the real job path (``workers.jobs.execute_bytes``) over a
grid of sizes, each in a fresh forked process pinned to one core, and records its wall time
and how far its address space grew (VmPeak above VmSize at the start: what the memory limit
bounds). Each kind is fitted as a floor plus a power law,

    y = exp(f) + exp(s + sum_i e_i log x_i),

by least squares on log y, and written to ``cost_model.json`` beside this module with the fit
quality: R^2 on log y and the worst ratio between estimate and measurement over the grid.

The fit committed (2026-12-04, AMD EPYC, 2 cores, shared with other work while measured;
R^2 on log y, worst = largest ratio between estimate and measurement either way):

    kind               points  seconds R^2, worst  peak R^2, worst  sizes measured
    rips_h0                12     0.90  x2.20      0.99  x1.32      500-4000 points, 2-8 coordinates
    rips_h1                15     0.98  x1.55      0.98  x1.62      250-4000 points, 2-8 coordinates
    rips_h2                14     0.98  x1.82      1.00  x1.04      100-1600 points, 2-8 coordinates
    cubical_2d              6     0.99  x1.46      1.00  x1.32      64^2-2048^2 pixels
    cubical_3d              8     1.00  x1.31      1.00  x1.08      12^3-128^3 voxels
    graph                   5     0.98  x1.27      1.00  x1.16      4e3-1.2e6 nodes and edges
    diagrams                4     0.99  x1.37      1.00  x1.00      1e3-3e5 pairs
    wasserstein             9     0.99  x1.52      1.00  x1.29      pairs of 100-4000 and 100-16000
    bottleneck              6     0.95  x1.70      0.97  x1.53      pairs of 100-2000 and 100-2400
    sliced_wasserstein      6     0.99  x1.50      0.94  x2.43      2e4-2e7 pairs x directions
    matrix                  5     1.00  x1.25      1.00  x1.00      4-256 diagrams of 3 pairs
    vectors                 8     1.00  x1.17      1.00  x1.27      50-1600 vectors of 10-1000

Beyond the sizes measured the laws extrapolate, and that is where they err most: the
bottleneck distance of two random 4000-pair diagrams ran over 60 s where the law says a few.

What the estimates are worth: they come from one machine (named in the file) and from data
chosen to be costly for their kind (uniform random points and diagrams, noise images), so
for most real data they are high; ``max_edge`` and features are not counted. Times assume
one core. The fit quality of the kind used travels with every estimate (``CostEstimate.fit``),
and the API refuses a job only when an estimate is a margin above a limit
(``Settings.cost_memory_margin``, ``cost_time_margin``): the runtime limits stop the rest.
"""

import functools
import math
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Annotated

import numpy as np
from pydantic import BaseModel, ConfigDict, Field

from workers.spec.filtrations import HeightFiltration, RipsFiltration
from workers.spec.jobs import DistanceTask, PersistenceTask, StoredType

__all__ = [
    "COST_MODEL_PATH",
    "Cost",
    "CostEstimate",
    "CostModel",
    "FitQuality",
    "KindFit",
    "PowerLaw",
    "cost_model",
    "distance_cost",
    "judged",
    "largest_pair_peak",
    "persistence_cost",
]

COST_MODEL_PATH = Path(__file__).with_name("cost_model.json")
"""The fitted coefficients, written by ``make estimates``."""


class PowerLaw(BaseModel):
    """y = exp(floor_log) + exp(scale_log + sum_i exponents[i] * log sizes[i])."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    floor_log: float
    scale_log: float
    exponents: list[float]

    def at(self, sizes: Sequence[float]) -> float:
        """The value at ``sizes`` (one per exponent, each at least 1)."""
        return math.exp(self.floor_log) + self.growth(sizes)

    def growth(self, sizes: Sequence[float]) -> float:
        """The power-law part alone (what adds up over the pairs of a matrix)."""
        logs = sum(e * math.log(max(1.0, x)) for e, x in zip(self.exponents, sizes, strict=True))
        return math.exp(self.scale_log + logs)


class FitQuality(BaseModel):
    """How well a kind's model matches the grid it was fitted on."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    measured: int = Field(description="Grid points measured.")
    seconds_r2: float = Field(description="R^2 of log seconds.")
    seconds_worst_ratio: float = Field(
        description="Largest max(estimate / measured, measured / estimate) of seconds."
    )
    peak_r2: float = Field(description="R^2 of log peak bytes.")
    peak_worst_ratio: float = Field(
        description="Largest max(estimate / measured, measured / estimate) of peak bytes."
    )
    sizes: dict[str, list[float]] = Field(description="Smallest and largest size measured.")


class KindFit(BaseModel):
    """The model of one kind of job."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    regressors: list[str]
    data: str = Field(description="What was measured.")
    seconds: PowerLaw
    peak_bytes: PowerLaw
    fit: FitQuality
    measurements: list[list[float]] = Field(
        description="The grid: one row per point, its sizes then seconds and peak bytes."
    )


class CostModel(BaseModel):
    """The whole of ``cost_model.json``."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    version: str
    fitted_at: str
    machine: str
    kinds: dict[str, KindFit]


@functools.cache
def cost_model() -> CostModel:
    """The committed model (read once per process)."""
    return CostModel.model_validate_json(COST_MODEL_PATH.read_text(encoding="utf-8"))


@dataclass(frozen=True)
class Cost:
    """A job's estimated cost: which kind's model priced it, and the field that drives it."""

    kind: str
    seconds: float
    peak_bytes: float
    pointer: str


class CostEstimate(BaseModel):
    """Answer of ``POST /v1/estimates``: what a job would cost, and whether it is refused."""

    kind: str = Field(description="The cost model entry that priced the job.")
    estimated_seconds: float = Field(description="Wall time on one core of the fit machine.")
    estimated_peak_bytes: int = Field(
        description="Growth of the compute process's address space (what the memory limit bounds)."
    )
    driving_field: str = Field(description="JSON Pointer to the field whose size sets the cost.")
    job_time_limit_s: float
    job_memory_limit_mb: int | None
    refused: bool = Field(description="Would POST /v1/jobs or /v1/distances refuse it (422)?")
    reasons: list[str] = Field(description="Why it is refused; empty when it is not.")
    model_version: str
    model_fitted_at: str
    fit: Annotated[FitQuality, Field(description="How well the kind's model fits its grid.")]


def _priced(kind: str, sizes: Sequence[float], pointer: str, repeat: int = 1) -> Cost:
    fit = cost_model().kinds[kind]
    return Cost(kind, repeat * fit.seconds.at(sizes), fit.peak_bytes.at(sizes), pointer)


def persistence_cost(
    stored: StoredType, shape: Sequence[int], task: PersistenceTask, uploaded: bool
) -> Cost:
    """The cost of a persistence job on a stored array of ``shape``."""
    filtration = task.filtration
    repeat = filtration.direction_count() if isinstance(filtration, HeightFiltration) else 1
    if stored in ("points", "labelled_points"):
        # A population of labelled points is at most all of them: priced as all of them.
        rips = filtration if isinstance(filtration, RipsFiltration) else RipsFiltration(type="rips")
        points = shape[0] if rips.subsample is None else min(shape[0], rips.subsample.size)
        width = shape[1] - (stored == "labelled_points")  # less the class column
        pointer = "/data" if uploaded else "/input/points"
        return _priced(f"rips_h{rips.max_dim}", [points, width], pointer)
    if stored in ("image", "mask"):
        cells = math.prod(shape)
        pointer = "/data" if uploaded else "/input/values"
        return _priced(f"cubical_{len(shape)}d", [cells], pointer, repeat)
    if stored == "graph":
        pointer = "/data" if uploaded else "/input/edges"
        return _priced("graph", [shape[0]], pointer, repeat)
    return _priced("diagrams", [shape[0]], "/input/diagrams")


def _pair_sizes(task: DistanceTask, first: np.ndarray, second: np.ndarray) -> list[np.ndarray]:
    """The sizes a pair's model takes (one array per regressor), for the pairs of diagrams
    of first[k] and second[k] rows: (smaller + 1, larger + 1) for the matching distances,
    (pairs of both + 1) * directions for sliced_wasserstein."""
    if task.metric == "sliced_wasserstein":
        return [(first + second + 1.0) * float(task.directions or 50)]
    return [np.minimum(first, second) + 1.0, np.maximum(first, second) + 1.0]


def largest_pair_peak(task: DistanceTask, counts: np.ndarray) -> float:
    """Estimated peak bytes of the costliest pair of diagrams with ``counts`` rows each
    (the two largest: every model grows with each size)."""
    if len(counts) < 2:
        return 0.0
    largest = np.sort(counts)[-2:].astype(np.float64)
    sizes = [float(size[0]) for size in _pair_sizes(task, largest[:1], largest[1:])]
    return cost_model().kinds[task.metric].peak_bytes.at(sizes)


def _pairs_seconds(task: DistanceTask, counts: np.ndarray) -> float:
    """Sum over the pairs of a matrix of the power-law part of a pair's seconds (the matrix
    kind carries the fixed cost of each pair). Diagrams of equal size are priced once, and
    one size at a time against the others, so memory stays linear in the count (an API
    process prices a 2000-diagram matrix without building its 2 million pairs)."""
    law = cost_model().kinds[task.metric].seconds
    sizes, multiplicity = np.unique(counts, return_counts=True)
    total = 0.0
    for k, size in enumerate(sizes):
        # Pairs of this size with itself, and with every larger size.
        others = sizes[k:]
        pairs = multiplicity[k] * multiplicity[k:].astype(np.float64)
        pairs[0] = multiplicity[k] * (multiplicity[k] - 1) / 2
        regressors = _pair_sizes(task, np.full(len(others), size), others)
        logs = sum(
            e * np.log(np.maximum(x, 1.0)) for e, x in zip(law.exponents, regressors, strict=True)
        )
        total += float((pairs * np.exp(law.scale_log + logs)).sum())
    return total


def distance_cost(
    stored: StoredType, shape: Sequence[int], task: DistanceTask, array: np.ndarray, base: str
) -> Cost:
    """The cost of a distance matrix; ``base`` is where its items sit in the request
    (``/diagrams``, ``/vectors`` or ``/job_ids``)."""
    count = task.count
    entries = float(count) * count
    if stored == "vectors":
        return _priced("vectors", [entries, shape[1]], base)
    vectors = cost_model().kinds["vectors"]
    matrix = cost_model().kinds["matrix"]
    counts = np.bincount(array[:, 0].astype(np.int64), minlength=count).astype(np.float64)
    seconds = _pairs_seconds(task, counts) + matrix.seconds.at([entries])
    # The matrix and its JSON cost what a matrix of vectors of length 1 does.
    peak = largest_pair_peak(task, counts) + vectors.peak_bytes.at([entries, 1.0])
    return Cost(task.metric, seconds, peak, f"{base}/{int(np.argmax(counts))}")


def judged(
    cost: Cost,
    *,
    time_limit_s: float,
    memory_limit_mb: int | None,
    time_margin: float,
    memory_margin: float,
) -> CostEstimate:
    """The estimate of ``cost`` against the limits: refused when it is a margin above one."""
    reasons = []
    if memory_limit_mb is not None and cost.peak_bytes > memory_margin * memory_limit_mb * 2**20:
        reasons.append(
            f"estimated peak memory {cost.peak_bytes / 2**20:.0f} MiB is more than "
            f"{memory_margin:g} times the job memory limit of {memory_limit_mb} MiB"
        )
    if cost.seconds > time_margin * time_limit_s:
        reasons.append(
            f"estimated time {cost.seconds:.0f} s is more than {time_margin:g} times the job "
            f"time limit of {time_limit_s:g} s"
        )
    model = cost_model()
    return CostEstimate(
        kind=cost.kind,
        estimated_seconds=cost.seconds,
        estimated_peak_bytes=round(cost.peak_bytes),
        driving_field=cost.pointer,
        job_time_limit_s=time_limit_s,
        job_memory_limit_mb=memory_limit_mb,
        refused=bool(reasons),
        reasons=reasons,
        model_version=model.version,
        model_fitted_at=model.fitted_at,
        fit=model.kinds[cost.kind].fit,
    )
