"""Registered feature specs: canonical JSON kept in Redis per tenant, under their spec_id.

Specs are scoped by tenant: what one tenant registered, another neither reads nor names in
its jobs (a 404, a 422), and one tenant's specs never count against another's quota. Each
spec expires ``feature_spec_ttl_s`` after it was last registered or used (read, or named by
id in a job), and a tenant keeps at most ``max_feature_specs`` at a time (its quota; a 429
names it, with Retry-After the seconds until its oldest spec expires).

A spec is small and its id is the hash of its content, so registering twice is harmless and a
spec that expired (or was lost with Redis) is restored by posting it again: the id stays the
same.

Redis keys::

    lacuna:feature-spec:<tenant>:<spec_id>   the canonical JSON, with the expiry
    lacuna:feature-specs:<tenant>            sorted set: spec_id by the time it expires
"""

import json

from pydantic import TypeAdapter
from redis import Redis

from service.errors import QuotaExceeded, RequestInvalid
from service.keys import tenant_record_name
from service.settings import Settings
from workers.spec import FeatureSpec, FieldError, JobRequest
from workers.spec.features import spec_id_of

__all__ = ["FeatureSpecStore"]

_SPEC = TypeAdapter(FeatureSpec)


def _key(owner: str, spec_id: str) -> str:
    return f"lacuna:feature-spec:{owner}:{spec_id}"


def _index(owner: str) -> str:
    return f"lacuna:feature-specs:{owner}"


# Scores are the moment a spec expires, to the microsecond of Redis's clock, as its key's
# own expiry: a spec leaves the count exactly when its key is gone.
_NOW = """
local clock = redis.call('TIME')
local now = tonumber(clock[1]) + tonumber(clock[2]) / 1e6
"""

_REGISTER = (
    _NOW
    + """
redis.call('ZREMRANGEBYSCORE', KEYS[2], '-inf', '(' .. now)
local count = redis.call('ZCARD', KEYS[2])
local known = redis.call('ZSCORE', KEYS[2], ARGV[1])
local limit = tonumber(redis.call('HGET', KEYS[3], 'max_feature_specs')) or tonumber(ARGV[4])
if not known and count >= limit then
  local oldest = redis.call('ZRANGE', KEYS[2], 0, 0, 'WITHSCORES')
  return {0, count, limit, math.ceil(tonumber(oldest[2]) - now)}
end
local ttl = tonumber(ARGV[3])
redis.call('SET', KEYS[1], ARGV[2], 'PX', ttl * 1000)
redis.call('ZADD', KEYS[2], now + ttl, ARGV[1])
redis.call('EXPIRE', KEYS[2], ttl)
if not known then count = count + 1 end
return {1, count, limit, 0}
"""
)
"""KEYS: the spec, the tenant's index, the tenant's record; ARGV: spec_id, document, ttl,
default limit. Answers {stored, count, limit, seconds until the oldest spec expires}."""

_FIND = (
    _NOW
    + """
local ttl = tonumber(ARGV[1])
local index = KEYS[#KEYS]
local found = {}
for i = 1, #KEYS - 1 do
  local document = redis.call('GET', KEYS[i])
  if document then
    redis.call('PEXPIRE', KEYS[i], ttl * 1000)
    redis.call('ZADD', index, now + ttl, ARGV[i + 1])
    found[i] = document
  else
    found[i] = false
  end
end
if #KEYS > 1 and redis.call('EXISTS', index) == 1 then redis.call('EXPIRE', index, ttl) end
return found
"""
)
"""KEYS: the specs, then the tenant's index; ARGV: ttl, then the spec ids. Reading a spec
refreshes its expiry."""

_COUNT = (
    _NOW
    + """
redis.call('ZREMRANGEBYSCORE', KEYS[1], '-inf', '(' .. now)
return redis.call('ZCARD', KEYS[1])
"""
)


class FeatureSpecStore:
    """Each tenant's specs by id, expiring when unused."""

    def __init__(self, redis: Redis, settings: Settings) -> None:
        self.redis = redis
        self.settings = settings
        self._register = redis.register_script(_REGISTER)
        self._find = redis.register_script(_FIND)
        self._count = redis.register_script(_COUNT)

    def register(self, spec: FeatureSpec, owner: str) -> str:
        """Keep ``spec`` (its canonical form) for ``owner`` and return its spec_id;
        QuotaExceeded when the owner already keeps ``max_feature_specs`` other specs."""
        spec_id = spec_id_of(spec)
        document = spec.model_dump(mode="json", exclude={"spec_id"})
        stored, count, limit, oldest_s = self._register(
            keys=[_key(owner, spec_id), _index(owner), tenant_record_name(owner)],
            args=[
                spec_id,
                json.dumps(document, sort_keys=True),
                self.settings.feature_spec_ttl_s,
                self.settings.max_feature_specs,
            ],
        )
        if not stored:
            raise QuotaExceeded(
                owner,
                "max_feature_specs",
                int(limit),
                max(1, int(oldest_s)),
                f"{count} feature specs are registered; each expires "
                f"{self.settings.feature_spec_ttl_s} s after its last use, or give the "
                "features in full in the job instead of by spec_id",
            )
        return spec_id

    def resolve(self, request: JobRequest, owner: str) -> JobRequest:
        """``request`` with every feature given by spec_id replaced by the spec ``owner``
        registered; RequestInvalid pointing at each id that is not registered."""
        references = request.references()
        found = self.find([spec_id for _, spec_id in references], owner)
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

    def find(self, spec_ids: list[str], owner: str) -> dict[str, FeatureSpec]:
        """The specs among ``spec_ids`` that ``owner`` registered (others are absent from the
        answer); each found one's expiry starts over."""
        if not spec_ids:
            return {}
        stored = self._find(
            keys=[*(_key(owner, spec_id) for spec_id in spec_ids), _index(owner)],
            args=[self.settings.feature_spec_ttl_s, *spec_ids],
        )
        return {
            spec_id: _SPEC.validate_json(raw)
            for spec_id, raw in zip(spec_ids, stored, strict=True)
            if raw is not None
        }

    def count(self, owner: str) -> int:
        """The specs ``owner`` keeps now (expired ones dropped)."""
        return int(self._count(keys=[_index(owner)]))
