"""The real app served over HTTP on 127.0.0.1 (werkzeug's server in a thread), for client
tests that need real answers: statuses, headers, retries."""

import threading
from collections.abc import Callable, Iterator

import pytest
from flask import Flask
from werkzeug.serving import BaseWSGIServer, make_server

from tests.support.ports import free_port


@pytest.fixture
def serve_over_http() -> Iterator[Callable[[Flask], str]]:
    """Serve an app on a free port of 127.0.0.1 for the rest of the test; its base URL."""
    servers: list[tuple[BaseWSGIServer, threading.Thread]] = []

    def serve(app: Flask) -> str:
        server = make_server("127.0.0.1", free_port(), app, threaded=True)
        thread = threading.Thread(target=server.serve_forever, name="test http", daemon=True)
        thread.start()
        servers.append((server, thread))
        return f"http://127.0.0.1:{server.server_port}"

    yield serve
    for server, thread in servers:
        server.shutdown()
        thread.join(10)
        server.server_close()
