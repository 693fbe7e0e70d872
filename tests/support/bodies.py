"""Request bodies (and queue payloads) many tests send, written once so that a change to the
request format is made in one place."""

from typing import Any

import numpy as np

from tests.support.synthetic import HEXAGON
from workers.spec import SCHEMA_VERSION, JobPayload
from workers.spec.arrays import array_sha256

PERSISTENCE_IMAGE_SPEC: dict[str, Any] = {
    "type": "persistence_image",
    "dim": 1,
    "birth_range": [0.0, 1.0],
    "persistence_range": [0.0, 2.0],
    "resolution": [4, 8],
    "sigma": 0.1,
    "weight": {"type": "power", "exponent": 1.0},
}
"""A small persistence image feature spec (32 values), valid everywhere."""


def labelled_job(
    points: np.ndarray, labels: list[str], filtration: dict[str, Any]
) -> dict[str, Any]:
    """A job on labelled points (units "um") with ``filtration``."""
    return {
        "input": {
            "type": "labelled_points",
            "points": points.tolist(),
            "labels": labels,
            "units": "um",
        },
        "filtration": filtration,
    }


def rips_job(
    points: Any = HEXAGON,
    *,
    units: str | None = None,
    features: list[Any] | None = None,
    **filtration: Any,
) -> dict[str, Any]:
    """A Rips job on ``points`` (JSON-ready lists; by default the regular hexagon of side 1),
    with the ``filtration`` fields beside ``"type": "rips"``; ``units`` and ``features`` are
    sent only when given."""
    body: dict[str, Any] = {
        "input": {"type": "points", "points": points},
        "filtration": {"type": "rips", **filtration},
    }
    if units is not None:
        body["input"]["units"] = units
    if features is not None:
        body["features"] = features
    return body


def rips_payload(
    points: np.ndarray, *, max_dim: int, time_limit_s: float, memory_limit_mb: int | None = None
) -> JobPayload:
    """The queue payload of a Rips job on ``points``, as the API would store it (for tests that
    drive the compute child directly, without Redis)."""
    return JobPayload.model_validate(
        {
            "schema_version": SCHEMA_VERSION,
            "input": {
                "type": "points",
                "shape": list(points.shape),
                "sha256": array_sha256(points),
            },
            "task": {"type": "persistence", "filtration": {"type": "rips", "max_dim": max_dim}},
            "request_sha256": "0" * 64,
            "time_limit_s": time_limit_s,
            "memory_limit_mb": memory_limit_mb,
        }
    )
