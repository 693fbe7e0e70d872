"""Jobs: their states, the status view, and what travels on the queue."""

from datetime import UTC, datetime
from enum import StrEnum
from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, Field, PlainSerializer

from workers.spec.distances import Metric, NeverDying
from workers.spec.features import FeatureSpec
from workers.spec.filtrations import Filtration
from workers.spec.networks import DescriptorOptions, OutputKind
from workers.spec.plots import PlotTask
from workers.spec.problems import Problem

__all__ = [
    "DEFAULT_QUEUE",
    "DEFAULT_REDIS_URL",
    "JOB_FUNCTION",
    "JobPayload",
    "JobState",
    "JobStatus",
    "DistanceTask",
    "GraphLayout",
    "LabelledLayout",
    "PersistenceTask",
    "Progress",
    "StoredInput",
    "StoredType",
    "cancel_key",
    "input_key",
]

JOB_FUNCTION = "workers.jobs.run"
"""Dotted path the service enqueues, so the API process never imports the numerical code."""

DEFAULT_REDIS_URL = "redis://127.0.0.1:6379/0"
"""Redis used by API and workers when none is configured."""

DEFAULT_QUEUE = "lacuna"
"""RQ queue name shared by API and workers unless LACUNA_QUEUE says otherwise."""


def input_key(job_id: str) -> str:
    """Redis key holding a job's input array as .npy bytes."""
    return f"lacuna:input:{job_id}"


def cancel_key(job_id: str) -> str:
    """Redis key whose presence asks a running job to stop."""
    return f"lacuna:cancel:{job_id}"


class JobState(StrEnum):
    """Lifecycle of a job as clients see it."""

    queued = "queued"
    running = "running"
    succeeded = "succeeded"
    failed = "failed"
    cancelled = "cancelled"


class Progress(BaseModel):
    """``done`` of ``total`` units of work: steps of a persistence job (a subsample, a
    network or skeleton graph and its descriptors when the job has them, the filtration's
    values unless they are the input's own, persistence, each feature, the result; per
    direction for a sweep), pairs of a distance matrix."""

    done: int
    total: int
    stage: Annotated[
        str | None,
        Field(
            description='What the job is doing now, in a few plain words ("persistence", '
            '"features", "distances").'
        ),
    ] = None


def _rfc3339(moment: datetime) -> str:
    """``moment`` in UTC as RFC 3339 with milliseconds and a Z: 2026-12-04T19:02:03.123Z."""
    utc = moment.replace(tzinfo=UTC) if moment.tzinfo is None else moment.astimezone(UTC)
    return utc.isoformat(timespec="milliseconds").replace("+00:00", "Z")


Timestamp = Annotated[
    datetime,
    PlainSerializer(_rfc3339, return_type=str, when_used="json"),
    Field(
        description="RFC 3339 in UTC with milliseconds and a Z, e.g. 2026-12-04T19:02:03.123Z.",
        json_schema_extra={"format": "date-time"},
    ),
]
"""A moment of a job's life, as the status answers it."""


class JobStatus(BaseModel):
    """Answer of ``GET /v1/jobs/{id}``."""

    job_id: str
    status: JobState
    created_at: Timestamp | None = None
    started_at: Timestamp | None = None
    ended_at: Timestamp | None = None
    problem: Annotated[Problem | None, Field(description="Why the job failed.")] = None
    progress: Annotated[
        Progress | None, Field(description="How far a running job is (jobs that report it).")
    ] = None
    links: dict[str, str]


class GraphLayout(BaseModel):
    """How a packed graph array splits into its parts
    (``workers.spec.kinds.graphs.graph_rows``)."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    node_count: int
    dims: int
    has_radius: bool
    has_length: bool
    uploaded: bool = False  # GraphML: warnings point at /data, not at /input/edges/k


class LabelledLayout(BaseModel):
    """The classes of a stored labelled point set (``workers.spec.kinds.labelled_points``):
    the array's last column is the position of each point's class in ``classes``."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    classes: list[str]
    centroids: Annotated[
        int, Field(description="Polygon features of a GeoJSON upload taken at their centroid.")
    ] = 0


StoredType = Literal[
    "points",
    "labelled_points",
    "diagrams",
    "diagram_set",
    "vectors",
    "image",
    "mask",
    "graph",
    "grid",
]


class StoredInput(BaseModel):
    """Description of an input array kept in Redis next to the job (not on the queue).

    Arrays by type: ``points`` (n, d) coordinates; ``labelled_points`` (n, d + 1), the
    coordinates then the class position (``LabelledLayout``); ``diagrams`` and
    ``diagram_set`` (k, 3) rows of (dimension or diagram index, birth, death with inf for
    never; a plot job's (k, 4), the pair's row in its result last); ``vectors`` (N, L);
    ``image`` and ``mask`` 2D or 3D arrays in the dtype they arrived in; ``graph`` (n + m,
    d + 1) rows of nodes, then edges (``workers.spec.kinds.graphs.graph_rows``); ``grid`` a 2D
    array of values to draw (a persistence image, a distance matrix).
    """

    model_config = ConfigDict(extra="forbid")

    type: StoredType
    shape: Annotated[list[int], Field(min_length=2, max_length=3)]
    sha256: str
    units: str | None = None


class PersistenceTask(BaseModel):
    """Diagrams of a filtration (or the given diagrams) and their feature vectors."""

    model_config = ConfigDict(extra="forbid")

    type: Literal["persistence"]
    filtration: Filtration | None
    given_dims: Annotated[
        list[int],
        Field(
            description="Dimensions of the given diagrams, empty ones included (input "
            "type diagrams)."
        ),
    ] = []
    features: Annotated[
        list[FeatureSpec], Field(description="Resolved specs, each with its spec_id set.")
    ] = []
    spacing: Annotated[
        list[float] | None,
        Field(
            description="Pixel size per axis (image and mask inputs), or the scale of each "
            "coordinate axis (graph inputs)."
        ),
    ] = None
    output: list[OutputKind] = ["diagrams"]
    descriptors: DescriptorOptions | None = None
    skeletonize: Annotated[bool, Field(description="Work on a mask's skeleton graph.")] = False
    graph: Annotated[
        GraphLayout | None, Field(description="How the stored graph rows split (graph inputs).")
    ] = None
    labelled: Annotated[
        LabelledLayout | None, Field(description="The classes of labelled points.")
    ] = None


class DistanceTask(BaseModel):
    """An N x N distance matrix between the stored diagrams or vectors."""

    model_config = ConfigDict(extra="forbid")

    type: Literal["distances"]
    metric: Metric
    order: float | None = None
    directions: int | None = None
    dim: int | None = None
    never_dying: Annotated[
        NeverDying | None, Field(description="Resolved for diagram metrics, else None.")
    ] = None
    count: Annotated[int, Field(ge=1)]
    job_ids: Annotated[
        list[str] | None, Field(description="The jobs compared, in matrix order (pictures).")
    ] = None


Task = Annotated[PersistenceTask | DistanceTask | PlotTask, Field(discriminator="type")]


DEFAULT_MAX_RESULT_PAIRS = 6_000_000
"""Most (birth, death) pairs one result may hold: about 250 MB of JSON, which RQ stores
base64-encoded, well under Redis's 512 MB limit on one value."""


DEFAULT_MAX_DOWKER_SIMPLICES = 20_000_000
"""Most candidate simplices one Dowker filtration builds: about 12 million for 20,000 vertices
and 5,000 witnesses at three spacings (measured), with room to spare."""


class JobPayload(BaseModel):
    """The single JSON argument of ``workers.jobs.run``."""

    model_config = ConfigDict(extra="forbid")

    schema_version: str
    input: StoredInput
    task: Task
    request_sha256: str
    time_limit_s: Annotated[float, Field(gt=0)]
    memory_limit_mb: Annotated[
        int | None,
        Field(
            ge=1,
            description="How far the compute process may grow its address space for this job "
            "(MiB, RLIMIT_AS above its size before the job); None: no limit.",
        ),
    ] = None
    max_result_pairs: Annotated[int, Field(ge=1)] = DEFAULT_MAX_RESULT_PAIRS
    max_dowker_simplices: Annotated[
        int, Field(ge=1, description="Most candidate simplices of a Dowker filtration.")
    ] = DEFAULT_MAX_DOWKER_SIMPLICES
    request_id: Annotated[
        str | None, Field(description="X-Request-Id of the request that queued the job.")
    ] = None
