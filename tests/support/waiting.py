"""Waiting on events instead of on the clock.

A test that sleeps a fixed time and then looks, or that compares an elapsed time against a
constant, fails whenever the machine is busy. These wait for the condition itself; their
deadlines are generous because they only bound a test that hangs: they are never the claim.
How fast something is belongs in ``make bench``.
"""

import threading
import time
from collections.abc import Callable
from typing import TypeVar

T = TypeVar("T")


def wait_until(
    predicate: Callable[[], object],
    timeout: float,
    what: str | Callable[[], str],
    interval: float = 0.05,
) -> None:
    """Return once ``predicate()`` is true; fail the test naming ``what`` (a text, or a
    function giving one at failure time) if it is not within ``timeout`` seconds."""
    deadline = time.monotonic() + timeout
    while not predicate():
        if time.monotonic() > deadline:
            said = what() if callable(what) else what
            raise AssertionError(f"not within {timeout:g} s: {said}")
        time.sleep(interval)


def finishes(action: Callable[[], T], timeout: float, what: str) -> T:
    """``action()``'s value, run in a thread; fail the test naming ``what`` if it has not
    returned within ``timeout`` seconds (the thread is a daemon, so a hung call cannot keep
    the suite alive). An exception in ``action`` is raised here."""
    outcome: list[T] = []
    errors: list[BaseException] = []

    def run() -> None:
        try:
            outcome.append(action())
        except BaseException as error:  # handed to the test's thread
            errors.append(error)

    thread = threading.Thread(target=run, name=f"finishes: {what}", daemon=True)
    thread.start()
    thread.join(timeout)
    if thread.is_alive():
        raise AssertionError(f"not within {timeout:g} s: {what}")
    if errors:
        raise errors[0]
    return outcome[0]
