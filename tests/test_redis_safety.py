"""The suite never touches a Redis it did not start.

A bystander ``redis-server`` stands in for somebody's queue on a shared lab server: it holds
keys in databases 0 and 11 to 14, and ``LACUNA_REDIS_URL`` (what a developer's shell may well
have set) points at it. A pytest run of real service and end-to-end tests, in a subprocess,
must leave it exactly as it was: its keys unchanged and not one connection received from the
run. ``LACUNA_TEST_REDIS_URL`` is the only way to name a shared Redis, and it is unset here.
"""

import os
import subprocess
import sys
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import pytest
from redis import Redis

from tests.support.redis import SHARED_URL_VARIABLE, own_redis_server, with_database

ROOT = Path(__file__).resolve().parents[1]

RUN = [
    "tests/service/test_jobs.py::test_submit_poll_fetch",
    "tests/service/test_jobs.py::test_cancel_queued_job",
    "tests/e2e/test_client.py::test_points_round_trip",
]
"""Tests that use each kind of Redis fixture: a flushed test database with a worker, and a
real `lacuna serve` stack."""

DATABASES = (0, 11, 12, 13, 14)


def _connections(redis: Redis) -> int:
    return int(redis.info("stats")["total_connections_received"])


@contextmanager
def _bystander() -> Iterator[str]:
    """Somebody's Redis, holding a key in each of DATABASES."""
    with own_redis_server() as url:
        for db in DATABASES:
            Redis.from_url(with_database(url, db)).set("their-queue", f"job of db {db}")
        yield url


def _pytest(environment: dict[str, str], *tests: str) -> subprocess.CompletedProcess[str]:
    run = subprocess.run(
        [sys.executable, "-m", "pytest", "-q", "-p", "no:cacheprovider", *tests],
        cwd=ROOT,
        env=environment,
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert run.returncode == 0, run.stdout[-3000:] + run.stderr[-3000:]
    return run


def _left(url: str) -> dict[int, bytes | None]:
    return {db: Redis.from_url(with_database(url, db)).get("their-queue") for db in DATABASES}


@pytest.mark.slow
def test_a_test_run_leaves_a_bystander_redis_alone() -> None:
    with _bystander() as bystander:
        watcher = Redis.from_url(with_database(bystander, 0))
        before = _connections(watcher)  # the watcher's one connection is open already
        environment = {
            key: value for key, value in os.environ.items() if key != SHARED_URL_VARIABLE
        }
        environment["LACUNA_REDIS_URL"] = with_database(bystander, 13)
        run = _pytest(environment, *RUN)
        assert f"{len(RUN)} passed" in run.stdout, run.stdout[-2000:]
        # Not one connection from the run (the next test shows this check can fail: a run
        # that used the bystander would connect, and its FLUSHDB would empty a database).
        assert _connections(watcher) == before
        assert _left(bystander) == {db: f"job of db {db}".encode() for db in DATABASES}


@pytest.mark.slow
def test_the_check_sees_a_run_that_uses_the_bystander() -> None:
    """The same watch catches a run that does use it: named by LACUNA_TEST_REDIS_URL, the
    suite connects and flushes its databases 12 to 14 (and only those)."""
    with _bystander() as bystander:
        watcher = Redis.from_url(with_database(bystander, 0))
        before = _connections(watcher)
        _pytest(dict(os.environ, **{SHARED_URL_VARIABLE: with_database(bystander, 0)}), RUN[1])
        assert _connections(watcher) > before
        left = _left(bystander)
        assert left[0] is not None and left[11] is not None
        assert left[13] is None  # the flushed test database
