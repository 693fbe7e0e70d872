"""Reaching Redis again after it went away: a capped exponential backoff, two ways.

``until_answered`` is for what must happen (registering, taking a job's input, storing a
result or a failure): it tries until Redis answers, waiting longer each time, or until the
worker is asked to stop (a result then stays unstored: its claim lapses and the reaper
queues the job again, its input still in Redis). ``Gate`` is for
what may be skipped while Redis is away (the cancel check a running job polls every 50 ms,
its progress): it lets a call through only when the backoff allows, and answers a default
meanwhile, so a job keeps computing through an outage instead of failing.

redis-py retries a failed command itself (a few seconds, for short blips); these wrap what
it gives up on.
"""

import logging
import time
from collections.abc import Callable
from typing import TypeVar

from redis.exceptions import ConnectionError as RedisConnectionError
from redis.exceptions import TimeoutError as RedisTimeoutError
from rq.exceptions import StopRequested

__all__ = ["LOST", "Backoff", "Gate", "GaveUp", "until_answered"]

log = logging.getLogger(__name__)

T = TypeVar("T")

LOST = (RedisConnectionError, RedisTimeoutError)
"""The errors of a Redis that is away (not of a command Redis refused)."""

FIRST_WAIT_S = 0.1
"""Wait after the first failed attempt; it doubles after each further one."""


class Backoff:
    """Waits of 0.1 s doubling up to ``cap_s``; ``reset`` after a success."""

    def __init__(self, cap_s: float) -> None:
        self.cap_s = cap_s
        self.failures = 0

    def next_wait(self) -> float:
        wait = min(self.cap_s, FIRST_WAIT_S * 2.0**self.failures)
        self.failures += 1
        return wait

    def reset(self) -> None:
        self.failures = 0


class GaveUp(StopRequested):
    """Redis was away and the worker was asked to stop: what was being done is left undone.

    A StopRequested, so RQ's work loop ends on it as on a stop (rq.worker.BaseWorker.work)."""


def until_answered(
    call: Callable[[], T], what: str, cap_s: float, give_up: Callable[[], bool] | None = None
) -> T:
    """``call()``'s value once Redis answers it; retried with backoff while Redis is away,
    unless ``give_up()`` says to stop trying (then ``GaveUp``)."""
    backoff = Backoff(cap_s)
    while True:
        try:
            value = call()
        except LOST as error:
            if give_up is not None and give_up():
                log.warning("Redis unreachable while %s (%s); giving up: stop asked", what, error)
                raise GaveUp(what) from error
            wait = backoff.next_wait()
            log.warning("Redis unreachable while %s (%s); retrying in %.1f s", what, error, wait)
            time.sleep(wait)
            continue
        if backoff.failures:
            log.warning("Redis answers again: %s done", what)
        return value


class Gate:
    """Lets calls through to Redis unless a recent one failed and the backoff is running."""

    def __init__(self, what: str, cap_s: float) -> None:
        self._what = what
        self._backoff = Backoff(cap_s)
        self._closed_until = 0.0

    def call(self, action: Callable[[], T], otherwise: T) -> T:
        """``action()``'s value, or ``otherwise`` while Redis is away (without trying it when
        the backoff says not yet)."""
        now = time.monotonic()
        if now < self._closed_until:
            return otherwise
        try:
            value = action()
        except LOST as error:
            wait = self._backoff.next_wait()
            if self._backoff.failures == 1:
                log.warning("Redis unreachable for %s (%s); going on without it", self._what, error)
            self._closed_until = time.monotonic() + wait
            return otherwise
        if self._backoff.failures:
            log.warning("Redis answers again for %s", self._what)
            self._backoff.reset()
        return value
