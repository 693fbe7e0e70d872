"""settings -> app -> client, plus a real worker process on the test's own queue."""

import os
import subprocess
import sys
import time
import uuid
from collections.abc import Iterator
from contextlib import contextmanager

import pytest
from flask import Flask
from flask.testing import FlaskClient
from redis import Redis
from rq import Queue, Worker
from rq.serializers import JSONSerializer

from service.app import create_app
from service.settings import Settings


@pytest.fixture
def settings(redis_url: str) -> Settings:
    """Settings on the test database with a queue of the test's own (no cross-talk)."""
    return Settings(redis_url=redis_url, queue=f"test-{uuid.uuid4().hex[:12]}")


@pytest.fixture
def app(settings: Settings) -> Flask:
    app = create_app(settings)
    app.testing = True
    return app


@pytest.fixture
def client(app: Flask) -> FlaskClient:
    return app.test_client()


def start_worker(redis_url: str, queue: str) -> subprocess.Popen[bytes]:
    """A real ``python -m workers`` process; returns once it is registered on ``queue``."""
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
            "WARNING",
        ],
        env=dict(os.environ),
    )
    connection = Redis.from_url(redis_url)
    deadline = time.monotonic() + 30
    while (
        Worker.count(
            connection=connection,
            queue=Queue(queue, connection=connection, serializer=JSONSerializer),
        )
        < 1
    ):
        if process.poll() is not None or time.monotonic() > deadline:
            process.kill()
            raise RuntimeError("worker did not start")
        time.sleep(0.05)
    return process


def stop_worker(process: subprocess.Popen[bytes]) -> None:
    process.terminate()
    try:
        process.wait(15)
    except subprocess.TimeoutExpired:
        process.kill()
        process.wait()


@pytest.fixture
def worker(settings: Settings) -> Iterator[subprocess.Popen[bytes]]:
    """One worker process serving this test's queue."""
    assert settings.redis_url is not None
    process = start_worker(settings.redis_url, settings.queue)
    yield process
    stop_worker(process)


@contextmanager
def served_on(redis_url: str) -> Iterator[tuple[FlaskClient, Settings]]:
    """One app and one real worker on a flushed database, for a whole module (starting a
    worker costs about a second); the database is not flushed per test, so the worker keeps
    its registration."""
    Redis.from_url(redis_url).flushdb()
    settings = Settings(redis_url=redis_url, queue=f"test-{uuid.uuid4().hex[:12]}")
    worker = start_worker(redis_url, settings.queue)
    app = create_app(settings)
    app.testing = True
    try:
        yield app.test_client(), settings
    finally:
        stop_worker(worker)
