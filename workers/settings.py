"""Settings of a worker process, read from ``LACUNA_*`` environment variables."""

from typing import Literal, Self

from pydantic import Field, model_validator
from pydantic_settings import BaseSettings, SettingsConfigDict

from workers.spec.jobs import DEFAULT_QUEUE, DEFAULT_REDIS_URL

__all__ = ["WorkerSettings"]


class WorkerSettings(BaseSettings):
    """What a worker needs: where the queue is, how it shows it is alive, and how much memory
    a job may take."""

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

    # Liveness and fault tolerance (workers/liveness.py, workers/reaper.py, workers/reconnect.py)
    heartbeat_interval_s: float = Field(
        5.0,
        gt=0,
        description="How often a worker renews its registration and the running job's claim "
        "in Redis, idle or busy (from a thread of its own); also how often one worker, "
        "holding a lock, looks for jobs of dead workers.",
    )
    dead_after_s: int = Field(
        30,
        ge=2,
        description="A worker that has not renewed its registration for this long is dead: "
        "its registration lapses, /readyz stops counting it and its running job is requeued "
        "or failed (within dead_after_s + heartbeat_interval_s of its death). At least three "
        "heartbeats long. Also how long a worker waits to see whether the holder of its "
        "--name is alive.",
    )
    lost_job_retries: int = Field(
        1,
        ge=0,
        description="How many times a job whose worker died under it is queued again; after "
        "that it fails with the worker-lost problem.",
    )
    redis_backoff_max_s: float = Field(
        5.0,
        gt=0,
        description="Longest wait between two attempts to reach Redis while it is away (the "
        "wait doubles from 0.1 s up to this); the worker keeps trying and never gives up a "
        "computed result.",
    )

    @model_validator(mode="after")
    def _beats_fit_in_lifetime(self) -> Self:
        if self.dead_after_s < 3 * self.heartbeat_interval_s:
            raise ValueError(
                f"dead_after_s ({self.dead_after_s}) must be at least three heartbeats "
                f"(3 x heartbeat_interval_s = {3 * self.heartbeat_interval_s:g})"
            )
        return self
