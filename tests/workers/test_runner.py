"""The worker's main Redis connection: a half-open TCP connection must end, an idle worker's
blocking dequeue must not.

Reference: RQ blocks on the queue (BLMOVE) for ``dequeue_timeout`` seconds
(rq/worker/base.py: ``worker_ttl - 15``) and quits on a socket timeout (``work`` breaks on
redis.exceptions.TimeoutError), so the socket timeout must be longer.
"""

import socket

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
