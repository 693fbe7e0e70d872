"""Per-process bounds on concurrent heavy work: large parses and ``Prefer: wait`` waiters.

A thread of the API that parses a large body holds memory several times the body's size; a
thread that waits on a job holds a thread the health checks need. Each is a semaphore taken
without blocking: past it the request is answered at once (503, or the status without waiting)
instead of queueing behind the others.
"""

import threading
from dataclasses import dataclass

from service.settings import Settings

__all__ = ["Gates"]


@dataclass(frozen=True)
class Gates:
    """The semaphores of one API process (one app)."""

    parses: threading.BoundedSemaphore
    waiters: threading.BoundedSemaphore

    @classmethod
    def of(cls, settings: Settings) -> "Gates":
        return cls(
            parses=threading.BoundedSemaphore(settings.max_large_parses),
            waiters=threading.BoundedSemaphore(settings.max_waiters),  # 0: nobody waits
        )
