"""A real ``lacuna serve`` with its own embedded Redis and data directory, whose children can
be found and killed: what the supervision tests and the soak share."""

import os
import signal
import subprocess
import threading
import time
from collections.abc import Callable
from pathlib import Path
from typing import IO

from tests.support.processes import children_of, descendants, running
from tests.support.stack import LACUNA
from tests.support.waiting import wait_until

ROLES = ("redis", "worker", "http")


def role_of(pid: int) -> str | None:
    """Which child of ``lacuna serve`` ``pid`` is, from its command line; None if unknown."""
    try:
        # redis-server rewrites its command line into a title; its comm stays the name.
        command = Path(f"/proc/{pid}/comm").read_text().strip()
        argv = Path(f"/proc/{pid}/cmdline").read_bytes().split(b"\0")
    except OSError:
        return None
    if command == "redis-server":
        return "redis"
    if b"workers" in argv[1:3]:
        return "worker"
    if b"gunicorn" in argv[1:3]:
        return "http"
    return None


class ServedStack:
    """``lacuna serve --data-dir DATA_DIR`` on 127.0.0.1:``port``, its output collected.

    ``preexec`` runs in the child before exec (resource limits, say); ``log`` receives every
    line the stack prints, as it prints it."""

    def __init__(
        self,
        data_dir: Path,
        port: int,
        *,
        workers: int = 2,
        http_workers: int = 1,
        env: dict[str, str] | None = None,
        preexec: Callable[[], None] | None = None,
        log: IO[str] | None = None,
    ) -> None:
        self.data_dir = data_dir
        self.base = f"http://127.0.0.1:{port}"
        self._lines: list[str] = []
        self._lock = threading.Lock()
        self._log = log
        environment = {k: v for k, v in os.environ.items() if k != "LACUNA_REDIS_URL"}
        environment.update(env or {})
        self.process = subprocess.Popen(
            [
                LACUNA,
                "serve",
                "--data-dir",
                str(data_dir),
                "--port",
                str(port),
                "--local-workers",
                str(workers),
                "--http-workers",
                str(http_workers),
            ],
            env=environment,
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            preexec_fn=preexec,
        )
        assert self.process.stdout is not None and self.process.stderr is not None
        self._readers = [
            threading.Thread(target=self._read, args=(stream,), daemon=True)
            for stream in (self.process.stdout, self.process.stderr)
        ]
        for reader in self._readers:
            reader.start()

    def _read(self, stream: IO[bytes]) -> None:
        for raw in stream:
            line = raw.decode(errors="replace").rstrip("\n")
            with self._lock:
                self._lines.append(line)
                if self._log is not None:
                    self._log.write(line + "\n")
                    self._log.flush()

    def lines(self) -> list[str]:
        """Every line printed so far, stdout and stderr interleaved as read."""
        with self._lock:
            return list(self._lines)

    def count(self, text: str) -> int:
        """How many printed lines hold ``text``."""
        return sum(text in line for line in self.lines())

    def wait_for_lines(self, text: str, count: int, timeout: float) -> None:
        wait_until(
            lambda: self.count(text) >= count,
            timeout,
            lambda: f"{count} line(s) with {text!r}; printed:\n" + "\n".join(self.lines()[-40:]),
            interval=0.05,
        )

    @property
    def redis_url(self) -> str:
        """The embedded Redis's URL, as the stack printed it at start."""
        marker = "embedded Redis on "
        for line in self.lines():
            if line.startswith(marker):
                return line[len(marker) :]
        raise AssertionError("the stack has not said where its Redis is")

    def children(self, role: str) -> list[int]:
        """Pids of the stack's direct children with ``role`` (one of ROLES), alive now."""
        return [
            pid for pid in children_of(self.process.pid) if running(pid) and role_of(pid) == role
        ]

    def kill(self, role: str) -> int:
        """SIGKILL one child with ``role`` (the oldest); its pid."""
        pid = min(self.children(role))
        os.kill(pid, signal.SIGKILL)
        return pid

    def stop(self, how: int = signal.SIGTERM, seconds: float = 60) -> set[int]:
        """Signal the stack and wait for it; the processes below it that outlived it."""
        below = descendants(self.process.pid)
        if self.process.poll() is None:
            self.process.send_signal(how)
        try:
            self.process.wait(seconds)
        finally:
            if self.process.poll() is None:
                self.process.kill()
                self.process.wait()
            for reader in self._readers:
                reader.join(5)
            for stream in (self.process.stdout, self.process.stderr):
                if stream is not None:
                    stream.close()
        deadline = time.monotonic() + 15
        while time.monotonic() < deadline and any(running(p) for p in below):
            time.sleep(0.1)
        return {p for p in below if running(p)}
