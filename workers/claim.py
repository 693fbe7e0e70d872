"""The claim of the job this worker process is running, as the job's own code sees it.

The worker (``workers.resilient``) sets it around each job: the job's entry in its queue's
StartedJobRegistry (``workers.reaper``) and whether the worker was asked to stop. The job
writes its progress and its problem only while the claim is still there, so a worker cut off
from Redis long enough to be reaped cannot write over the next attempt of its job; and it
stops computing once the claim is gone. Outside a worker (inline runs) there is no claim and
nothing is checked.
"""

from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass

from redis import Redis

__all__ = ["Claim", "current", "holding"]


@dataclass(frozen=True)
class Claim:
    """Member ``member`` of the sorted set ``registry_key`` on ``connection``."""

    connection: Redis
    registry_key: str
    member: str
    stop_asked: Callable[[], bool]

    def held(self) -> bool:
        """Is the claim still in the registry (not reaped)? Raises when Redis is away."""
        return self.connection.zscore(self.registry_key, self.member) is not None


_current: Claim | None = None


def current() -> Claim | None:
    """The claim of the job running now in this process; None outside a worker's job."""
    return _current


@contextmanager
def holding(claim: Claim) -> Iterator[None]:
    """``claim`` is the current one inside the block."""
    global _current
    _current = claim
    try:
        yield
    finally:
        _current = None
