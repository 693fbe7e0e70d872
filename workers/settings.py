"""Settings of a worker process, read from ``LACUNA_*`` environment variables."""

from typing import Literal

from pydantic import Field
from pydantic_settings import BaseSettings, SettingsConfigDict

from workers.spec.jobs import DEFAULT_QUEUE, DEFAULT_REDIS_URL

__all__ = ["WorkerSettings"]


class WorkerSettings(BaseSettings):
    """What a worker needs: where the queue is, and how much memory a job may take."""

    model_config = SettingsConfigDict(env_prefix="LACUNA_", extra="ignore")

    redis_url: str = Field(DEFAULT_REDIS_URL, description="Redis holding the job queue.")
    queue: str = Field(DEFAULT_QUEUE, description="Name of the RQ queue to take jobs from.")

    # Observability (logs)
    log_format: Literal["json", "text"] = Field(
        "json",
        description="Log lines on stderr: one JSON object per line (for a log collector), or "
        "text (for a person at a terminal).",
    )

    job_memory_ceiling_mb: int | None = Field(
        None,
        ge=1,
        description="Most MiB any job may grow this worker's compute process by, whatever "
        "memory limit the job was queued with (the API's job_memory_limit_mb); unset: the "
        "job's own limit. For a worker on a smaller machine than the API assumes.",
    )
