"""What the app factory stores in ``app.extensions['lacuna']``: built once per process."""

from dataclasses import dataclass
from typing import Any

from service.feature_specs import FeatureSpecStore
from service.queue import JobQueue
from service.settings import Settings
from service.uploads import UPLOAD_FORMATS
from workers.spec import (
    NPY_MEDIA_TYPE,
    SCHEMA_VERSION,
    Capabilities,
    FeatureSpec,
    Filtration,
    Input,
    Limits,
)
from workers.spec.capabilities import FILTRATIONS, FiltrationCapability
from workers.spec.distances import DIAGRAM_METRICS, VECTOR_METRICS
from workers.spec.features import FEATURE_SPEC_VERSION
from workers.spec.inputs import MAX_COORDINATES
from workers.spec.results import ALL_PACKAGES, ENGINES, package_versions
from workers.spec.tags import members_by_tag

__all__ = ["ServiceState", "limits_of", "capabilities_of"]


def limits_of(settings: Settings) -> Limits:
    """The limits a client can see in /v1/capabilities, from the settings."""
    return Limits(
        max_points=settings.max_points,
        max_input_points=settings.max_input_points,
        max_body_bytes=settings.max_body_bytes,
        max_dim=settings.max_dim,
        max_coordinates=MAX_COORDINATES,
        max_features=settings.max_features,
        max_vector_length=settings.max_vector_length,
        max_distance_count=settings.max_distance_count,
        max_image_pixels=settings.max_image_pixels,
        max_volume_voxels=settings.max_volume_voxels,
        max_graph_nodes=settings.max_graph_nodes,
        max_graph_edges=settings.max_graph_edges,
        max_label_classes=settings.max_label_classes,
        max_dowker_simplices=settings.max_dowker_simplices,
        max_upload_bytes=settings.max_upload_bytes,
        max_result_pairs=settings.max_result_pairs,
        job_time_limit_s=settings.job_time_limit_s,
        job_memory_limit_mb=settings.job_memory_limit_mb,
        result_ttl_s=settings.result_ttl_s,
        max_wait_s=settings.max_wait_s,
        idempotency_ttl_s=settings.idempotency_ttl_s,
    )


def capabilities_of(limits: Limits) -> Capabilities:
    """Answer of /v1/capabilities: input, filtration and feature types come from the unions."""
    return Capabilities(
        schema_version=SCHEMA_VERSION,
        input_types=list(members_by_tag(Input)),
        filtrations=_filtrations(),
        features=list(members_by_tag(FeatureSpec)),
        feature_spec_version=FEATURE_SPEC_VERSION,
        metrics=[*DIAGRAM_METRICS, *VECTOR_METRICS],
        engines=dict(ENGINES),
        binary_media_type=NPY_MEDIA_TYPE,
        upload_formats=list(UPLOAD_FORMATS),
        limits=limits,
        versions=package_versions(ALL_PACKAGES),
    )


def _filtrations() -> list[FiltrationCapability]:
    """The capability entry of every filtration type, in the order of the union; a type
    without an entry is a bug, found when the app starts."""
    entries = {entry.type: entry for entry in FILTRATIONS}
    types = list(members_by_tag(Filtration))
    if set(types) != set(entries):
        raise RuntimeError(f"filtration entries {sorted(entries)} do not match {types}")
    return [entries[name] for name in types]


@dataclass(frozen=True)
class ServiceState:
    """Per-process state of the API: settings, the queue handle and what is computed once."""

    settings: Settings
    queue: JobQueue
    feature_specs: FeatureSpecStore
    limits: Limits
    capabilities: Capabilities
    openapi: dict[str, Any]
