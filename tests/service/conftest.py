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
from tests.support.redis import SERVED_DB, with_database
from tests.support.worker_process import served_on, start_worker, stop_worker


@pytest.fixture
def settings(redis_url: str) -> Settings:
    """Settings on the test database with a queue of the test's own (no cross-talk), in
    open access (no keys; tests of keys ask for them)."""
    return Settings(redis_url=redis_url, queue=fresh_queue(), auth="open")


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


@pytest.fixture(scope="module")
def served(redis_server: str) -> Iterator[tuple[FlaskClient, Settings]]:
    """One app and one real worker for a whole module, on SERVED_DB (flushed when a module
    starts, not per test, so the worker keeps its registration)."""
    with served_on(with_database(redis_server, SERVED_DB)) as served:
        yield served


@pytest.fixture
def served_client(served: tuple[FlaskClient, Settings]) -> FlaskClient:
    """The client of ``served``: jobs it submits run on the module's worker."""
    return served[0]
