"""Per-tenant quotas, kept in Redis: the request rate, queued plus running jobs, and (with
``service.feature_specs``) registered feature specs.

Each quota has a default in the settings; a tenant's record (``lacuna:tenant:<tenant>``, see
``service.keys``) may override it, and ``lacuna keys quotas`` sets those overrides. Every check
is one Lua script, so it is atomic across API processes and costs one round trip:

- ``admit``: the API key's record and the tenant's token bucket (``lacuna:rate:<tenant>``,
  refilled at ``requests_per_s`` up to ``request_burst``; the clock is Redis's TIME, one clock
  for every API process).
- ``UnfinishedJobs``: a sorted set of the tenant's job ids (``lacuna:unfinished:<tenant>``).
  Instead of a counter (which drifts when a decrement is lost with a crashed worker or an
  expired job), a reservation that finds the set full first drops the ids whose RQ job has
  ended or no longer exists, then counts what is left.

The scripts name keys they derive from a tenant (not only their KEYS): fine on the one Redis
lacuna runs on, not on Redis Cluster (which RQ does not support either).
"""

from dataclasses import dataclass
from typing import Any

from redis import Redis
from rq.job import Job
from rq.job import JobStatus as RQStatus
from rq.utils import as_text

from service.keys import tenant_record_name
from service.settings import MIN_REQUESTS_PER_S, Settings
from workers.spec.capabilities import TenantQuotas

__all__ = [
    "Admission",
    "Reservation",
    "UnfinishedJobs",
    "QUOTA_OVERRIDES",
    "quotas_of",
    "set_overrides",
]

QUOTA_OVERRIDES: dict[str, type] = {
    "max_unfinished_jobs": int,
    "requests_per_s": float,
    "request_burst": int,
    "max_feature_specs": int,
}
"""The quotas a tenant's record may override, with their types (the same fields and
defaults as the settings)."""

RESERVATION_GRACE_S = 60
"""A reserved job id without an RQ job this long after its reservation was never enqueued
(its request died between the two); younger ones are still being enqueued and count."""

_ENDED = [RQStatus.FINISHED, RQStatus.FAILED, RQStatus.STOPPED, RQStatus.CANCELED]


def quotas_of(redis: Redis, settings: Settings, tenant: str) -> TenantQuotas:
    """The tenant's quotas: the settings' defaults, under its record's overrides."""
    stored = {as_text(k): as_text(v) for k, v in redis.hgetall(tenant_record_name(tenant)).items()}
    values: dict[str, Any] = {name: getattr(settings, name) for name in QUOTA_OVERRIDES}
    for name, kind in QUOTA_OVERRIDES.items():
        if name in stored:
            values[name] = kind(stored[name])
    return TenantQuotas(**values, feature_spec_ttl_s=settings.feature_spec_ttl_s)


def set_overrides(redis: Redis, tenant: str, overrides: dict[str, float | int | None]) -> None:
    """Store the tenant's quota overrides; a None value removes that override. ValueError for
    an unknown quota or a value that is not positive (a rate of 0 would never refill), and
    for a rate below ``MIN_REQUESTS_PER_S``."""
    for key, value in overrides.items():
        if key not in QUOTA_OVERRIDES:
            raise ValueError(f"no quota {key!r}; the quotas are {', '.join(QUOTA_OVERRIDES)}")
        if value is not None and not value > 0:
            raise ValueError(f"{key} must be positive, not {value}")
        if key == "requests_per_s" and value is not None and value < MIN_REQUESTS_PER_S:
            raise ValueError(f"{key} must be at least {MIN_REQUESTS_PER_S}, not {value}")
    name = tenant_record_name(tenant)
    given: dict[Any, Any] = {k: str(v) for k, v in overrides.items() if v is not None}
    if given:
        redis.hset(name, mapping=given)
    removed = [key for key, value in overrides.items() if value is None]
    if removed:
        redis.hdel(name, *removed)


def rate_key(tenant: str) -> str:
    return f"lacuna:rate:{tenant}"


def unfinished_key(tenant: str) -> str:
    return f"lacuna:unfinished:{tenant}"


_ADMIT = """
local tenant = ARGV[1]
if #KEYS == 1 then
  local record = redis.call('HMGET', KEYS[1], 'tenant', 'revoked')
  if not record[1] then return {0, '', '0', '0', '0'} end
  if record[2] == '1' then return {-1, record[1], '0', '0', '0'} end
  tenant = record[1]
end
local overrides = redis.call('HMGET', ARGV[4] .. tenant, 'requests_per_s', 'request_burst')
local rate = tonumber(overrides[1]) or tonumber(ARGV[2])
local burst = tonumber(overrides[2]) or tonumber(ARGV[3])
local clock = redis.call('TIME')
local now = tonumber(clock[1]) + tonumber(clock[2]) / 1e6
local bucket = ARGV[5] .. tenant
local held = redis.call('HMGET', bucket, 'tokens', 'at')
local tokens = tonumber(held[1]) or burst
local at = tonumber(held[2]) or now
tokens = math.min(burst, tokens + math.max(0, now - at) * rate)
local outcome, wait = 1, 0
if tokens >= 1 then tokens = tokens - 1 else outcome, wait = 2, (1 - tokens) / rate end
redis.call('HSET', bucket, 'tokens', tostring(tokens), 'at', tostring(now))
-- At most a year: a rate stored before its bound (or by hand) must not overflow EXPIRE.
redis.call('EXPIRE', bucket, math.min(math.ceil(burst / rate) + 1, 31536000))
return {outcome, tenant, tostring(wait), tostring(rate), tostring(burst)}
"""
"""Outcomes: 1 admitted, 2 rate-limited (after ``wait`` seconds a token is back), 0 no such
key, -1 revoked. A refused request takes no token."""


@dataclass(frozen=True)
class Admitted:
    """What ``Admission.admit`` found: an outcome of _ADMIT, the tenant, the wait, and the
    tenant's rate and burst."""

    outcome: int
    tenant: str
    wait_s: float
    rate: float
    burst: int

    @property
    def admitted(self) -> bool:
        return self.outcome == 1

    @property
    def unknown(self) -> bool:
        return self.outcome == 0

    @property
    def revoked(self) -> bool:
        return self.outcome == -1


class Admission:
    """Who a request acts for and whether its tenant's rate allows it now."""

    def __init__(self, redis: Redis, settings: Settings) -> None:
        self.settings = settings
        self._script = redis.register_script(_ADMIT)

    def admit(self, key_record: str | None, owner: str) -> Admitted:
        """Look up ``key_record`` (the Redis key of an API key's record; None in open mode,
        where ``owner`` acts) and take one token from its tenant's bucket."""
        answer = self._script(
            keys=[] if key_record is None else [key_record],
            args=[
                owner,
                repr(self.settings.requests_per_s),
                self.settings.request_burst,
                tenant_record_name(""),
                rate_key(""),
            ],
        )
        outcome, tenant, wait_s, rate, burst = (
            item.decode() if isinstance(item, bytes) else str(item) for item in answer
        )
        return Admitted(int(outcome), tenant, float(wait_s), float(rate), int(float(burst)))


_RESERVE = """
local clock = redis.call('TIME')
local now = tonumber(clock[1]) + tonumber(clock[2]) / 1e6
local limit = tonumber(redis.call('HGET', KEYS[2], 'max_unfinished_jobs')) or tonumber(ARGV[2])
local count = redis.call('ZCARD', KEYS[1])
if ARGV[1] == '' or count >= limit then
  local ended = {}
  for i = 6, #ARGV do ended[ARGV[i]] = true end
  local members = redis.call('ZRANGE', KEYS[1], 0, -1, 'WITHSCORES')
  count = 0
  for i = 1, #members, 2 do
    local status = redis.call('HGET', ARGV[3] .. members[i], 'status')
    local gone = (not status) and tonumber(members[i + 1]) < now - tonumber(ARGV[4])
    if gone or (status and ended[status]) then
      redis.call('ZREM', KEYS[1], members[i])
    else
      count = count + 1
    end
  end
end
if ARGV[1] == '' or count >= limit then return {0, count, limit} end
redis.call('ZADD', KEYS[1], now, ARGV[1])
redis.call('EXPIRE', KEYS[1], tonumber(ARGV[5]))
return {1, count + 1, limit}
"""
"""With a job id (ARGV[1]), add it when the set holds fewer ids than the limit; only a full
set is pruned of ended and vanished ids (one HGET per id), so most submissions cost O(1) and
a pruning happens at most once per ``limit - unfinished`` submissions. Without a job id,
prune and count. Answers {added, count (exact after a pruning), limit}."""


@dataclass(frozen=True)
class Reservation:
    """Answer of ``UnfinishedJobs.reserve``: whether the id was added, the count, the limit."""

    added: bool
    count: int
    limit: int


class UnfinishedJobs:
    """Each tenant's queued plus running jobs, as a set of job ids pruned on every use."""

    def __init__(self, redis: Redis, settings: Settings) -> None:
        self.redis = redis
        self.settings = settings
        self._script = redis.register_script(_RESERVE)

    def reserve(self, tenant: str, job_id: str) -> Reservation:
        """Count ``job_id`` against the tenant's quota if it has room (``added``)."""
        return self._run(tenant, job_id)

    def count(self, tenant: str) -> int:
        """The tenant's queued plus running jobs now."""
        return self._run(tenant, "").count

    def release(self, tenant: str, job_id: str) -> None:
        """Stop counting a job that was never enqueued or has been deleted."""
        self.redis.zrem(unfinished_key(tenant), job_id)

    def _run(self, tenant: str, job_id: str) -> Reservation:
        # The set outlives its newest job by as long as that job may wait and run.
        keep = self.settings.queued_ttl_s + int(self.settings.job_time_limit_s) + 60
        answer = self._script(
            keys=[unfinished_key(tenant), tenant_record_name(tenant)],
            args=[
                job_id,
                self.settings.max_unfinished_jobs,
                Job.redis_job_namespace_prefix,
                RESERVATION_GRACE_S,
                keep,
                *[status.value for status in _ENDED],
            ],
        )
        return Reservation(bool(answer[0]), int(answer[1]), int(answer[2]))
