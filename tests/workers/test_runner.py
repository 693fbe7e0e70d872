"""The worker's main Redis connection: a half-open TCP connection must end, an idle worker's
blocking dequeue must not.

Reference: RQ blocks on the queue (BLMOVE) for ``dequeue_timeout`` seconds
(rq/worker/base.py: ``worker_ttl - 15``) and quits on a socket timeout (``work`` breaks on
redis.exceptions.TimeoutError), so the socket timeout must be longer.
"""

import socket
import subprocess
from pathlib import Path

from tests.support.processes import terminate
from tests.support.redis import answers, redis_binary
from tests.support.waiting import wait_until
from workers.runner import build_worker
from workers.settings import WorkerSettings


def test_the_main_connection_times_out_but_only_after_a_dequeue(redis_url: str) -> None:
    worker = build_worker(redis_url, "runner-test", settings=WorkerSettings())
    kwargs = worker.connection.connection_pool.connection_kwargs
    assert kwargs["socket_keepalive"] is True
    assert worker.dequeue_timeout < kwargs["socket_timeout"] < 2 * worker.worker_ttl
    assert worker.connection.ping()
    # The keepalive reaches the socket itself (SO_KEEPALIVE, socket(7)).
    connection = worker.connection.connection_pool.get_connection()  # connected
    try:
        sock = connection._sock
        assert sock is not None
        assert sock.getsockopt(socket.SOL_SOCKET, socket.SO_KEEPALIVE) == 1
    finally:
        worker.connection.connection_pool.release(connection)


def test_a_worker_on_a_unix_socket_starts(tmp_path: Path) -> None:
    # `lacuna serve` talks to its embedded Redis over a unix socket, where TCP options such as
    # SO_KEEPALIVE do not apply (unix(7)); redis-py refuses them there.
    socket_path = tmp_path / "redis.sock"
    server = subprocess.Popen(
        [redis_binary(), "--port", "0", "--unixsocket", str(socket_path), "--save", ""],
        stdout=subprocess.DEVNULL,
        cwd=tmp_path,
    )
    try:
        url = f"unix://{socket_path}?db=0"
        wait_until(lambda: socket_path.exists() and answers(url), 10, "a redis on a socket")
        worker = build_worker(url, "runner-test", settings=WorkerSettings())
        assert "socket_keepalive" not in worker.connection.connection_pool.connection_kwargs
        assert worker.connection.ping()
    finally:
        terminate(server, 10)
