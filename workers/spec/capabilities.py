"""What this deployment accepts, so clients can check before sending."""

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
