"""Real worker processes (``python -m workers``) on a test's own queue, and an app beside one."""

import os
import subprocess
import sys
from collections.abc import Iterator
from contextlib import contextmanager
from typing import IO

from flask.testing import FlaskClient
from redis import Redis
from rq import Queue, Worker
from rq.serializers import JSONSerializer

from service.app import create_app
from service.settings import Settings
from tests.support.api import fresh_queue
from tests.support.processes import terminate
from tests.support.waiting import wait_until


def start_worker(
    redis_url: str,
    queue: str,
    *,
    name: str | None = None,
    env: dict[str, str] | None = None,
    log_level: str = "WARNING",
    stderr: IO[bytes] | None = None,
) -> subprocess.Popen[bytes]:
    """A real ``python -m workers`` process (named ``name``, with ``env`` added to the
    environment); returns once this very process is registered on ``queue``. Its log lines go
    to ``stderr`` (a file) if given."""
    process = subprocess.Popen(
        [
            sys.executable,
            "-m",
            "workers",
            "--redis",
            redis_url,
            "--queue",
            queue,
            "--log-level",
            log_level,
            *(["--name", name] if name else []),
        ],
        env={**os.environ, **(env or {})},
        stderr=stderr,
    )
    connection = Redis.from_url(redis_url)
    listened = Queue(queue, connection=connection, serializer=JSONSerializer)

    def registered() -> bool:
        if process.poll() is not None:
            raise RuntimeError(f"the worker exited with {process.returncode} before it registered")
        return any(
            worker.pid == process.pid
            for worker in Worker.all(connection=connection, queue=listened)
        )

    try:
        wait_until(registered, 60, f"a worker registered on queue {queue}")
    except BaseException:
        process.kill()
        process.wait()
        raise
    return process


def stop_worker(process: subprocess.Popen[bytes]) -> None:
    """SIGTERM the worker and reap it (SIGKILL after 15 s)."""
    terminate(process)


@contextmanager
def served_on(redis_url: str) -> Iterator[tuple[FlaskClient, Settings]]:
    """One app and one real worker on a flushed database, for a whole module (starting a
    worker costs about a second); the database is not flushed per test, so the worker keeps
    its registration."""
    Redis.from_url(redis_url).flushdb()
    settings = Settings(redis_url=redis_url, queue=fresh_queue(), auth="open")
    worker = start_worker(redis_url, settings.queue)
    app = create_app(settings)
    app.testing = True
    try:
        yield app.test_client(), settings
    finally:
        stop_worker(worker)
