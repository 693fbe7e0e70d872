"""What this deployment accepts, so clients can check before sending."""

from typing import Literal

from pydantic import BaseModel, Field


class Limits(BaseModel):
    """Configured limits; requests above them are refused with a problem naming the limit."""

    max_points: int = Field(description="Most points a Rips filtration runs on (after subsample).")
    max_input_points: int = Field(description="Most points (or diagram pairs) in one request.")
    max_body_bytes: int
    max_dim: int
    max_coordinates: int
    max_features: int = Field(description="Most feature specs in one job.")
    max_vector_length: int = Field(description="Most values in one job's concatenated vector.")
    max_distance_count: int = Field(description="Most diagrams or vectors in one distance matrix.")
    max_image_pixels: int = Field(description="Most pixels in one 2D image or mask.")
    max_volume_voxels: int = Field(description="Most voxels in one 3D volume or mask.")
    max_graph_nodes: int = Field(description="Most nodes in one graph.")
    max_graph_edges: int = Field(description="Most edges in one graph.")
    max_upload_bytes: int = Field(description="Largest multipart request (array upload).")
    max_result_pairs: int = Field(description="Most diagram pairs in one result.")
    job_time_limit_s: float
    job_memory_limit_mb: int | None = Field(
        description="How far one job may grow its compute process (MiB of address space); "
        "a job above it fails with a memory-limit problem. None: no limit."
    )
    result_ttl_s: int
    max_wait_s: int = Field(description="Cap on the Prefer: wait=N request header.")
    idempotency_ttl_s: int = Field(
        description="How long an Idempotency-Key answers the job it first made."
    )


class TenantQuotas(BaseModel):
    """What one tenant may hold and send; above a quota the API answers 429 naming it."""

    max_unfinished_jobs: int = Field(description="Most queued plus running jobs at a time.")
    requests_per_s: float = Field(description="Requests per second sustained (token bucket).")
    request_burst: int = Field(description="Requests at once above the sustained rate.")
    max_feature_specs: int = Field(description="Most feature specs registered at a time.")
    feature_spec_ttl_s: int = Field(
        description="A feature spec expires this long after it was last registered or used."
    )


class TenantUsage(BaseModel):
    """How much of its quotas a tenant uses now."""

    unfinished_jobs: int = Field(description="Queued plus running jobs.")
    feature_specs: int = Field(description="Feature specs registered and not expired.")


class Caller(BaseModel):
    """Who the request acts for, under which access mode, with its quotas and usage."""

    tenant: str = Field(description='The tenant of the API key; "public" in open mode.')
    access: Literal["keys", "open"] = Field(
        description='"keys": requests need an API key (Authorization: Bearer); "open": no '
        'keys, every request acts for "public".'
    )
    quotas: TenantQuotas
    usage: TenantUsage


class Capabilities(BaseModel):
    """Answer of ``GET /v1/capabilities``."""

    schema_version: str
    input_types: list[str]
    filtrations: list[str]
    features: list[str]
    feature_spec_version: str
    metrics: list[str]
    value_convention: str
    binary_media_type: str = Field(description="Media type of binary arrays (NumPy .npy).")
    upload_formats: list[str] = Field(
        description="File formats accepted as the `data` part of a multipart job request."
    )
    limits: Limits
    versions: dict[str, str]
    caller: Caller | None = Field(
        None, description="The caller's tenant, quotas and usage (filled in per request)."
    )
