"""Registered feature specs: canonical JSON kept in Redis under their spec_id, without expiry.

A spec is small and its id is the hash of its content, so registering twice is harmless and a
spec lost with Redis is restored by posting it again: the id stays the same.
"""

import json

from pydantic import TypeAdapter
from redis import Redis

from service.errors import RequestInvalid
from workers.spec import FeatureSpec, FieldError, JobRequest
from workers.spec.features import spec_id_of

__all__ = ["FeatureSpecStore"]

_SPEC = TypeAdapter(FeatureSpec)


def _key(spec_id: str) -> str:
    return f"lacuna:feature-spec:{spec_id}"


class FeatureSpecStore:
    """Specs by id, for every owner alike (a spec says how to compute, not whose data)."""

    def __init__(self, redis: Redis) -> None:
        self.redis = redis

    def register(self, spec: FeatureSpec) -> str:
        """Keep ``spec`` (its canonical form) and return its spec_id."""
        spec_id = spec_id_of(spec)
        document = spec.model_dump(mode="json", exclude={"spec_id"})
        self.redis.set(_key(spec_id), json.dumps(document, sort_keys=True))
        return spec_id

    def resolve(self, request: JobRequest) -> JobRequest:
        """``request`` with every feature given by spec_id replaced by the registered spec;
        RequestInvalid pointing at each id that is not registered."""
        references = request.references()
        found = self.find([spec_id for _, spec_id in references])
        missing = [
            FieldError(
                pointer=f"/features/{index}/spec_id",
                message=f"no spec is registered under {spec_id}; POST the spec to "
                "/v1/feature-specs first",
            )
            for index, spec_id in references
            if spec_id not in found
        ]
        if missing:
            raise RequestInvalid(missing)
        return request.with_features({index: found[spec_id] for index, spec_id in references})

    def find(self, spec_ids: list[str]) -> dict[str, FeatureSpec]:
        """The registered specs among ``spec_ids`` (unknown ids are absent from the answer)."""
        if not spec_ids:
            return {}
        stored = self.redis.mget([_key(spec_id) for spec_id in spec_ids])
        return {
            spec_id: _SPEC.validate_json(raw)
            for spec_id, raw in zip(spec_ids, stored, strict=True)
            if raw is not None
        }
