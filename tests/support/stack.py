"""Real ``lacuna serve`` processes for end-to-end tests: start, wait until ready, stop."""

import os
import signal
import subprocess
import sys
import time
import uuid
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import requests

from tests.support.ports import free_port
from tests.support.processes import descendants, running
from tests.support.waiting import wait_until

LACUNA = str(Path(sys.executable).with_name("lacuna"))


def answers(url: str, status: int = 200) -> requests.Response | None:
    """The answer to GET ``url`` if it has ``status``; None while nothing answers so."""
    try:
        answer = requests.get(url, timeout=1)
    except requests.RequestException:
        return None
    return answer if answer.status_code == status else None


def wait_ready(base: str, workers: int = 1, seconds: float = 60) -> None:
    """Return once ``base`` says it is ready with at least ``workers`` workers."""

    def ready() -> bool:
        answer = answers(base + "/readyz")
        return answer is not None and answer.json()["workers"] >= workers

    wait_until(ready, seconds, f"{base} ready with {workers} worker(s)", interval=0.1)


def stop(process: subprocess.Popen[bytes], how: int) -> set[int]:
    """Signal ``process``, wait for it; the processes below it that outlived it."""
    children = descendants(process.pid)
    process.send_signal(how)
    process.wait(30)
    deadline = time.monotonic() + 15
    while time.monotonic() < deadline and any(running(p) for p in children):
        time.sleep(0.1)
    return {p for p in children if running(p)}


@contextmanager
def running_stack(redis_url: str, workers: int = 2) -> Iterator[str]:
    """``lacuna serve`` on a free port with ``workers`` local workers on a queue of its own,
    against ``redis_url``; yields its base URL once ready, stops it afterwards."""
    port = free_port()
    env = dict(os.environ, LACUNA_QUEUE=f"e2e-{uuid.uuid4().hex[:12]}")
    command = [LACUNA, "serve", "--redis", redis_url, "--port", str(port)]
    process = subprocess.Popen(
        [*command, "--local-workers", str(workers), "--http-workers", "1"], env=env
    )
    base = f"http://127.0.0.1:{port}"
    try:
        wait_ready(base, workers)
        yield base
    finally:
        stop(process, signal.SIGTERM)
