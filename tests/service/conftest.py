"""settings -> app -> client, plus a real worker process on the test's own queue
(tests/support/worker_process.py)."""

import subprocess
from collections.abc import Iterator

import pytest
from flask import Flask
from flask.testing import FlaskClient

from service.app import create_app
from service.settings import Settings
from tests.support.api import fresh_queue
from tests.support.worker_process import start_worker, stop_worker


@pytest.fixture
def settings(redis_url: str) -> Settings:
    """Settings on the test database with a queue of the test's own (no cross-talk)."""
    return Settings(redis_url=redis_url, queue=fresh_queue())


@pytest.fixture
def app(settings: Settings) -> Flask:
    app = create_app(settings)
    app.testing = True
    return app


@pytest.fixture
def client(app: Flask) -> FlaskClient:
    return app.test_client()


@pytest.fixture
def worker(settings: Settings) -> Iterator[subprocess.Popen[bytes]]:
    """One worker process serving this test's queue."""
    assert settings.redis_url is not None
    process = start_worker(settings.redis_url, settings.queue)
    yield process
    stop_worker(process)
