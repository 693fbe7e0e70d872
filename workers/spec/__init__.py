"""The contract between clients, the HTTP service and the workers, as pydantic models.

These models are the single source of the OpenAPI document in ``openapi/``. Nothing here
imports Flask, Redis or RQ.
"""

from workers.spec.capabilities import Capabilities, Limits
from workers.spec.distances import DistanceRequest, DistanceResult, NullEntry
from workers.spec.features import (
    FeatureItem,
    FeatureSpec,
    FeatureSpecAnswer,
    SpecReference,
)
from workers.spec.filtrations import Filtration, RipsFiltration, Subsample
from workers.spec.inputs import DiagramsInput, Input, PointsInput
from workers.spec.jobs import (
    DistanceTask,
    JobPayload,
    JobState,
    JobStatus,
    PersistenceTask,
    Progress,
    StoredInput,
)
from workers.spec.problems import FieldError, Problem
from workers.spec.requests import JobRequest
from workers.spec.results import Diagram, FeatureVector, JobResult, LayoutEntry, Provenance

SCHEMA_VERSION = "6"
"""Version of the request/result schema; bumped on any change a client could notice."""

NPY_MEDIA_TYPE = "application/x-npy"
"""Media type of every binary array lacuna sends or takes: NumPy .npy bytes (NEP 1), never
pickled; vectors and matrices as little-endian float64 in C order."""

__all__ = [
    "NPY_MEDIA_TYPE",
    "SCHEMA_VERSION",
    "Capabilities",
    "Diagram",
    "DiagramsInput",
    "DistanceRequest",
    "DistanceResult",
    "DistanceTask",
    "FeatureItem",
    "FeatureSpec",
    "FeatureSpecAnswer",
    "FeatureVector",
    "FieldError",
    "Filtration",
    "Input",
    "JobPayload",
    "JobRequest",
    "JobResult",
    "JobState",
    "JobStatus",
    "LayoutEntry",
    "Limits",
    "NullEntry",
    "PersistenceTask",
    "PointsInput",
    "Problem",
    "Progress",
    "Provenance",
    "RipsFiltration",
    "SpecReference",
    "StoredInput",
    "Subsample",
]
