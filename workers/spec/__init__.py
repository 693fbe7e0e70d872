"""The contract between clients, the HTTP service and the workers, as pydantic models.

These models are the single source of the OpenAPI document in ``openapi/``. Nothing here
imports Flask, Redis or RQ.
"""

from workers.spec.capabilities import Capabilities, Limits
from workers.spec.filtrations import Filtration, RipsFiltration, Subsample
from workers.spec.inputs import Input, PointsInput
from workers.spec.jobs import JobPayload, JobState, JobStatus, StoredInput
from workers.spec.problems import FieldError, Problem
from workers.spec.requests import JobRequest
from workers.spec.results import Diagram, DiagramResult, Provenance

SCHEMA_VERSION = "1"
"""Version of the request/result schema; bumped on any change a client could notice."""

__all__ = [
    "SCHEMA_VERSION",
    "Capabilities",
    "Diagram",
    "DiagramResult",
    "FieldError",
    "Filtration",
    "Input",
    "JobPayload",
    "JobRequest",
    "JobState",
    "JobStatus",
    "Limits",
    "PointsInput",
    "Problem",
    "Provenance",
    "RipsFiltration",
    "StoredInput",
    "Subsample",
]
