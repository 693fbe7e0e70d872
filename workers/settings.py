"""Settings of a worker process, read from ``LACUNA_*`` environment variables."""

from pydantic import Field
from pydantic_settings import BaseSettings, SettingsConfigDict

DEFAULT_REDIS_URL = "redis://127.0.0.1:6379/0"
DEFAULT_QUEUE = "lacuna"


class WorkerSettings(BaseSettings):
    """What a worker needs: where the queue is."""

    model_config = SettingsConfigDict(env_prefix="LACUNA_", extra="ignore")

    redis_url: str = Field(DEFAULT_REDIS_URL, description="Redis holding the job queue.")
    queue: str = Field(DEFAULT_QUEUE, description="Name of the RQ queue to take jobs from.")
