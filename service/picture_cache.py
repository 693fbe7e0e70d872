"""Drawn pictures of jobs, kept in Redis beside the job for the rest of its result TTL.

The cache is bounded twice: a picture larger than ``max_bytes`` is never kept, and each job
has a budget of ``bytes_per_job``, counted in a key that expires with the job's pictures;
once a job's pictures fill it, further pictures of the job are drawn but not kept. Every
query a client can write (sizes, formats, filters) is a distinct picture, so without the
budget one job could fill Redis.
"""

import functools
from typing import Any

from redis import Redis

__all__ = ["PictureCache"]

PICTURE_PREFIX = "lacuna:picture:"
"""``<prefix><job id>:<digest>``: a hash of one picture (media_type, data)."""

USED_PREFIX = "lacuna:picture-bytes:"
"""``<prefix><job id>``: bytes of the job's pictures kept now (an integer)."""

# KEYS: the budget counter, the picture. ARGV: size, budget, TTL, media type, data. Keeps the
# picture only if it fits the budget; one script, so two requests cannot both pass the check.
_PUT = """
local size = tonumber(ARGV[1])
if redis.call('EXISTS', KEYS[2]) == 1 then return 1 end
if tonumber(redis.call('GET', KEYS[1]) or '0') + size > tonumber(ARGV[2]) then return 0 end
redis.call('INCRBY', KEYS[1], size)
redis.call('EXPIRE', KEYS[1], ARGV[3])
redis.call('HSET', KEYS[2], 'media_type', ARGV[4], 'data', ARGV[5])
redis.call('EXPIRE', KEYS[2], ARGV[3])
return 1
"""


class PictureCache:
    """Pictures by job and digest (of the query and the drawing), at most ``max_bytes``
    each and ``bytes_per_job`` per job."""

    def __init__(self, redis: Redis, *, max_bytes: int, bytes_per_job: int) -> None:
        self.redis = redis
        self.max_bytes = max_bytes
        self.bytes_per_job = bytes_per_job

    @staticmethod
    def picture_key(job_id: str, digest: str) -> str:
        """Redis key of the picture ``digest`` of job ``job_id``."""
        return f"{PICTURE_PREFIX}{job_id}:{digest}"

    def get(self, job_id: str, digest: str) -> tuple[bytes, str] | None:
        """The kept picture and its media type, or None."""
        key = self.picture_key(job_id, digest)
        media_type, data = self.redis.hmget(key, ["media_type", "data"])
        if isinstance(media_type, bytes) and isinstance(data, bytes):
            return data, media_type.decode()
        return None

    def put(self, job_id: str, digest: str, picture: bytes, media_type: str, ttl_s: int) -> bool:
        """Keep ``picture`` for ``ttl_s`` seconds (the job's remaining result TTL); False,
        keeping nothing, when it is empty, over ``max_bytes``, would take the job's pictures
        over ``bytes_per_job``, or ``ttl_s`` is not positive."""
        if not 0 < len(picture) <= self.max_bytes or ttl_s <= 0:
            return False
        kept = self._put_script(
            keys=[f"{USED_PREFIX}{job_id}", self.picture_key(job_id, digest)],
            args=[len(picture), self.bytes_per_job, ttl_s, media_type, picture],
        )
        return bool(kept)

    @functools.cached_property
    def _put_script(self) -> Any:
        return self.redis.register_script(_PUT)
