"""What this deployment accepts, so clients can check before sending."""

from pydantic import BaseModel, Field


class Limits(BaseModel):
    """Configured limits; requests above them are refused with a problem naming the limit."""

    max_points: int = Field(description="Most points a Rips filtration runs on (after subsample).")
    max_input_points: int = Field(description="Most points accepted in one request.")
    max_body_bytes: int
    max_dim: int
    max_coordinates: int
    job_time_limit_s: float
    result_ttl_s: int
    max_wait_s: int = Field(description="Cap on the Prefer: wait=N request header.")


class Capabilities(BaseModel):
    """Answer of ``GET /v1/capabilities``."""

    schema_version: str
    input_types: list[str]
    filtrations: list[str]
    value_convention: str
    limits: Limits
    versions: dict[str, str]
