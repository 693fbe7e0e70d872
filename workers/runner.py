"""The worker process: an RQ ``SimpleWorker`` on the JSON serializer plus one compute child.

``SimpleWorker`` runs jobs in its own process (no fork per job, ~3 ms of overhead); the
numerical work goes to the compute child forked at start-up, which the worker kills on a time
limit. The worker class (``workers.resilient.ResilientWorker``) outlives Redis outages and
beats so that a dead worker is noticed (``workers.liveness``). Start it with ``lacuna worker``
or ``python -m workers``.
"""

import argparse
import logging
import socket
import uuid

from redis import Redis
from redis.backoff import NoBackoff
from redis.retry import Retry
from rq import Queue
from rq.serializers import JSONSerializer

from workers import jobs
from workers.liveness import NameInUse
from workers.logs import configure_logging
from workers.reconnect import until_answered
from workers.resilient import ResilientWorker
from workers.settings import WorkerSettings

__all__ = ["main", "build_worker", "worker_parser"]

log = logging.getLogger(__name__)


def build_worker(
    redis_url: str,
    queue_name: str,
    name: str | None = None,
    settings: WorkerSettings | None = None,
) -> ResilientWorker:
    """A worker bound to ``queue_name`` that never unpickles (JSONSerializer throughout);
    waits for Redis if it is not there yet."""
    settings = settings or WorkerSettings()
    beat_timeout = max(1.0, settings.dead_after_s / 3)
    # A half-open TCP connection (a peer gone without a FIN) would block a read forever: TCP
    # keepalive and a socket timeout end it. The timeout must outlast RQ's blocking dequeue
    # (BLMOVE for worker_ttl - 15 s, rq.worker.BaseWorker.dequeue_timeout, worker_ttl being
    # dead_after_s + 15 here), or an idle worker would time out and quit: RQ's own
    # connection_timeout, dequeue timeout + 10 s, which RQ would raise it to anyway.
    # TCP keepalive is a TCP option: a unix socket (the embedded Redis) takes none.
    keepalive = {"socket_keepalive": True} if not redis_url.startswith("unix:") else {}
    connection = Redis.from_url(
        redis_url,
        socket_timeout=settings.dead_after_s + 10,
        socket_connect_timeout=beat_timeout,
        health_check_interval=settings.dead_after_s,
        **keepalive,
    )
    # The heartbeat's own connection: no retries inside redis-py, so the thread sees every
    # failed beat, and a socket timeout well inside a lifetime.
    beat_connection = Redis.from_url(
        redis_url,
        retry=Retry(NoBackoff(), 0),
        socket_timeout=beat_timeout,
        socket_connect_timeout=beat_timeout,
        **keepalive,
    )
    queue = Queue(queue_name, connection=connection, serializer=JSONSerializer)
    worker_name = name or f"lacuna-{socket.gethostname()}-{uuid.uuid4().hex[:8]}"
    # log_job_description=False: the description of every job is the whole payload.
    return until_answered(
        lambda: ResilientWorker(
            [queue],
            settings=settings,
            beat_connection=beat_connection,
            connection=connection,
            serializer=JSONSerializer,
            name=worker_name,
            log_job_description=False,
        ),
        "connecting",
        settings.redis_backoff_max_s,
    )


def worker_parser(settings: WorkerSettings) -> argparse.ArgumentParser:
    """Options of ``lacuna worker`` (``python -m workers``)."""
    parser = argparse.ArgumentParser(
        prog="lacuna worker",
        description="Run one job worker: it takes jobs from the server's Redis one at a time "
        "and computes them. Start one per core you want to give; they need nothing but the "
        "Redis URL of the server.",
    )
    parser.add_argument(
        "--redis",
        default=settings.redis_url,
        metavar="URL",
        help="the Redis URL the server uses (LACUNA_REDIS_URL)",
    )
    parser.add_argument(
        "--queue", default=settings.queue, help="queue name, as the server's (LACUNA_QUEUE)"
    )
    parser.add_argument(
        "--name",
        default=None,
        help="worker name shown in the server's worker list; a restarted worker may reuse "
        "the name of a dead one, never of a live one",
    )
    parser.add_argument("--burst", action="store_true", help="exit when the queue is empty")
    parser.add_argument(
        "--log-level",
        default="INFO",
        help="least severe log lines written: DEBUG, INFO, WARNING or ERROR (default INFO)",
    )
    return parser


def main(argv: list[str] | None = None) -> int:
    settings = WorkerSettings()
    args = worker_parser(settings).parse_args(argv)
    configure_logging(settings.log_format, args.log_level)
    worker = build_worker(args.redis, args.queue, args.name, settings)
    jobs.compute_process()  # fork the compute child now, after the heavy imports
    try:
        worker.work(burst=args.burst, logging_level=args.log_level, with_scheduler=False)
    except NameInUse as error:
        log.error("%s", error)
        return 2
    finally:
        jobs.compute_process().close()
    return 0
