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

from tests.support.processes import descendants, running
from tests.support.synthetic import free_port

LACUNA = str(Path(sys.executable).with_name("lacuna"))


def wait_ready(base: str, workers: int = 1, seconds: float = 60) -> None:
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        try:
            answer = requests.get(base + "/readyz", timeout=1)
            if answer.status_code == 200 and answer.json()["workers"] >= workers:
                return
        except requests.RequestException:
            pass
        time.sleep(0.1)
    raise AssertionError(f"{base} never became ready")


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
