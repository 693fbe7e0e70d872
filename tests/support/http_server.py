"""A real gunicorn API process (the argv `lacuna serve` gives it, with its config module) for
tests of what only the HTTP server does: its own error answers, its threads."""

import os
import subprocess
import sys
from collections.abc import Iterator
from contextlib import contextmanager

from tests.support.ports import free_port
from tests.support.processes import terminate
from tests.support.stack import answers
from tests.support.waiting import wait_until


@contextmanager
def gunicorn_api(redis_url: str, queue: str, threads: int = 4, **env: str) -> Iterator[str]:
    """One gunicorn worker with ``threads`` threads serving the API on a free port of
    127.0.0.1 against ``redis_url`` and ``queue`` (``env``: more LACUNA_* variables); yields
    its base URL once /healthz answers."""
    port = free_port()
    argv = [sys.executable, "-m", "gunicorn", "service.wsgi:app"]
    argv += ["--config", "python:service.gunicorn_config", "--bind", f"127.0.0.1:{port}"]
    argv += ["--workers", "1", "--threads", str(threads), "--no-control-socket"]
    variables = dict(
        os.environ, LACUNA_REDIS_URL=redis_url, LACUNA_QUEUE=queue, LACUNA_AUTH="open", **env
    )
    process = subprocess.Popen(argv, env=variables, stderr=subprocess.DEVNULL)
    base = f"http://127.0.0.1:{port}"
    try:
        wait_until(
            lambda: process.poll() is not None or answers(base + "/healthz") is not None,
            60,
            "gunicorn answering /healthz",
        )
        assert process.poll() is None, "gunicorn exited at start"
        yield base
    finally:
        terminate(process)
