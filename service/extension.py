"""What the app factory stores in ``app.extensions['lacuna']``."""

from dataclasses import dataclass
from typing import Any

from service.queue import JobQueue
from service.settings import Settings
from workers.spec import Limits
from workers.spec.inputs import MAX_COORDINATES

__all__ = ["Lacuna", "limits_of"]


def limits_of(settings: Settings) -> Limits:
    """The limits a client can see in /v1/capabilities, from the settings."""
    return Limits(
        max_points=settings.max_points,
        max_input_points=settings.max_input_points,
        max_body_bytes=settings.max_body_bytes,
        max_dim=settings.max_dim,
        max_coordinates=MAX_COORDINATES,
        job_time_limit_s=settings.job_time_limit_s,
        result_ttl_s=settings.result_ttl_s,
        max_wait_s=settings.max_wait_s,
    )


@dataclass(frozen=True)
class Lacuna:
    settings: Settings
    queue: JobQueue
    limits: Limits
    openapi: dict[str, Any]
