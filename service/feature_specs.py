"""Registered feature specs: canonical JSON kept in Redis under their spec_id, without expiry.

A spec is small and its id is the hash of its content, so registering twice is harmless and a
spec lost with Redis is restored by posting it again: the id stays the same.
"""

import json

from pydantic import TypeAdapter
from redis import Redis

from workers.spec import FeatureSpec
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
