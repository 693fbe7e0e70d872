"""The API under a real gunicorn, configured as ``lacuna serve`` configures it
(``service.gunicorn_config``), with its stderr kept in a file for the test to read."""

import os
import subprocess
import sys
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from tests.support.ports import free_port
from tests.support.processes import terminate
from tests.support.stack import answers
from tests.support.waiting import wait_until


@contextmanager
def running_gunicorn(
    redis_url: str, queue: str, folder: Path, http_workers: int = 2
) -> Iterator[tuple[str, Path]]:
    """gunicorn with ``http_workers`` processes on a free port, metrics in multiprocess mode
    (a fresh ``folder/metrics``); yields the base URL and the file its stderr goes to."""
    port = free_port()
    metrics_dir = folder / "metrics"
    metrics_dir.mkdir()
    log = folder / "gunicorn.log"
    env = dict(
        os.environ,
        LACUNA_REDIS_URL=redis_url,
        LACUNA_QUEUE=queue,
        LACUNA_AUTH="open",
        LACUNA_LOG_FORMAT="json",
        PROMETHEUS_MULTIPROC_DIR=str(metrics_dir),
    )
    with log.open("wb") as stderr:
        process = subprocess.Popen(
            [
                sys.executable,
                "-m",
                "gunicorn",
                "service.wsgi:app",
                "--bind",
                f"127.0.0.1:{port}",
                "--workers",
                str(http_workers),
                "--no-control-socket",
                "--config",
                "python:service.gunicorn_config",
            ],
            env=env,
            stderr=stderr,
        )
        base = f"http://127.0.0.1:{port}"
        try:

            def up() -> bool:
                if process.poll() is not None:
                    raise RuntimeError(f"gunicorn exited at start: {log.read_text()[-2000:]}")
                return answers(base + "/healthz") is not None

            wait_until(up, 60, f"gunicorn answering at {base}", interval=0.1)
            yield base, log
        finally:
            terminate(process)
