"""What this deployment accepts, so clients can check before sending."""

from typing import Literal

from pydantic import BaseModel, Field

from workers.spec.results import Engine, ValueConvention


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
    max_label_classes: int = Field(description="Most classes of labelled points.")
    max_dowker_simplices: int = Field(
        description="Most candidate simplices one Dowker filtration may build (refused at "
        "max_radius before building)."
    )
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


class FiltrationCapability(BaseModel):
    """One filtration type: what it runs on, what its values are and what computes it."""

    type: str
    inputs: list[str] = Field(
        description='Input types that take it (a mask sent with "skeletonize" takes the '
        "filtrations of a graph)."
    )
    value_conventions: list[ValueConvention] = Field(
        description="The value_convention its results carry (cubical: pixel_value for "
        "sublevel, negated_pixel_value for superlevel)."
    )
    values_are_lengths: bool = Field(
        description="Are the values lengths? Then results carry the coordinates' unit in "
        "`units`; otherwise (pixel and node values) `units` is null."
    )
    engines: list[Engine] = Field(description="What computes it (see `engines`).")


FILTRATIONS: tuple[FiltrationCapability, ...] = (
    FiltrationCapability(
        type="rips",
        inputs=["points", "labelled_points"],
        value_conventions=["edge_length"],
        values_are_lengths=True,
        engines=["rips-cut-collapse-float64"],
    ),
    FiltrationCapability(
        type="dowker",
        inputs=["labelled_points"],
        value_conventions=["witness_radius"],
        values_are_lengths=True,
        engines=["dowker-witness-float64"],
    ),
    FiltrationCapability(
        type="cubical",
        inputs=["image"],
        value_conventions=["pixel_value", "negated_pixel_value"],
        values_are_lengths=False,
        engines=["cubical-lacuna-c"],
    ),
    FiltrationCapability(
        type="distance",
        inputs=["mask"],
        value_conventions=["signed_distance"],
        values_are_lengths=True,
        engines=["cubical-lacuna-c"],
    ),
    FiltrationCapability(
        type="height",
        inputs=["mask", "graph"],
        value_conventions=["height"],
        values_are_lengths=True,
        engines=["cubical-lacuna-c", "graph-lacuna-c"],
    ),
    FiltrationCapability(
        type="radial",
        inputs=["mask", "graph"],
        value_conventions=["radial_distance"],
        values_are_lengths=True,
        engines=["cubical-lacuna-c", "graph-lacuna-c"],
    ),
    FiltrationCapability(
        type="geodesic",
        inputs=["graph"],
        value_conventions=["geodesic_distance"],
        values_are_lengths=True,
        engines=["graph-lacuna-c"],
    ),
    FiltrationCapability(
        type="attribute",
        inputs=["graph"],
        value_conventions=["node_value"],
        values_are_lengths=False,
        engines=["graph-lacuna-c"],
    ),
)
"""Every filtration type, in the order of the Filtration union."""


class Capabilities(BaseModel):
    """Answer of ``GET /v1/capabilities``."""

    schema_version: str
    input_types: list[str]
    filtrations: list[FiltrationCapability]
    features: list[str]
    feature_spec_version: str
    metrics: list[str]
    engines: dict[str, str] = Field(
        description="Every engine a result's provenance may name, and what it is."
    )
    binary_media_type: str = Field(description="Media type of binary arrays (NumPy .npy).")
    upload_formats: list[str] = Field(
        description="File formats accepted as the `data` part of a multipart job request."
    )
    limits: Limits
    versions: dict[str, str] = Field(
        description="Versions of every distribution a result's provenance may name."
    )
    caller: Caller | None = Field(
        None, description="The caller's tenant, quotas and usage (filled in per request)."
    )
