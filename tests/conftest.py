"""Shared fixtures: the suite's own real Redis for the whole session (tests/support/redis.py).

Every process the suite starts inherits ``LACUNA_REDIS_URL`` pointing at that server, so no
default anywhere can reach a Redis the suite did not start.
"""

import os
from collections.abc import Iterator

import pytest
from redis import Redis

from tests.support.redis import TEST_DB, RedisUnavailable, test_redis, with_database


@pytest.fixture(scope="session")
def redis_server() -> Iterator[str]:
    """URL of the suite's Redis (its database part is replaced by ``with_database``)."""
    try:
        with test_redis() as url:
            before = os.environ.get("LACUNA_REDIS_URL")
            os.environ["LACUNA_REDIS_URL"] = with_database(url, TEST_DB)
            try:
                yield url
            finally:
                if before is None:
                    os.environ.pop("LACUNA_REDIS_URL", None)
                else:
                    os.environ["LACUNA_REDIS_URL"] = before
    except RedisUnavailable as error:
        pytest.exit(str(error), returncode=3)


@pytest.fixture(scope="session", autouse=True)
def _own_redis_only(redis_server: str) -> None:
    """Start the suite's Redis before any test, so nothing falls back to another one."""


@pytest.fixture(scope="session", autouse=True)
def _own_state_folder(tmp_path_factory: pytest.TempPathFactory) -> Iterator[None]:
    """A `lacuna serve` that a test starts without --data-dir keeps its state under the
    suite's own XDG_STATE_HOME, never in the user's ~/.local/state/lacuna (whose lock would
    stop the user's own server)."""
    before = os.environ.get("XDG_STATE_HOME")
    os.environ["XDG_STATE_HOME"] = str(tmp_path_factory.mktemp("state"))
    yield
    if before is None:
        os.environ.pop("XDG_STATE_HOME", None)
    else:
        os.environ["XDG_STATE_HOME"] = before


@pytest.fixture
def redis_url(redis_server: str) -> str:
    """URL of the test database, flushed before each test (it holds nothing else)."""
    url = with_database(redis_server, TEST_DB)
    Redis.from_url(url).flushdb()
    return url
