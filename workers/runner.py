"""The worker process: an RQ ``SimpleWorker`` on the JSON serializer plus one compute child.

``SimpleWorker`` runs jobs in its own process (no fork per job, ~3 ms of overhead); the
numerical work goes to the compute child forked at start-up, which the worker kills on a time
limit. Start it with ``lacuna worker`` or ``python -m workers``.
"""

import argparse
import logging
import socket
import uuid

from redis import Redis
from rq import Queue, SimpleWorker
from rq.serializers import JSONSerializer

from workers import jobs
from workers.settings import WorkerSettings

__all__ = ["main", "build_worker", "worker_parser"]


def build_worker(redis_url: str, queue_name: str, name: str | None = None) -> SimpleWorker:
    """An RQ worker bound to ``queue_name`` that never unpickles (JSONSerializer throughout)."""
    connection = Redis.from_url(redis_url)
    queue = Queue(queue_name, connection=connection, serializer=JSONSerializer)
    worker_name = name or f"lacuna-{socket.gethostname()}-{uuid.uuid4().hex[:8]}"
    # log_job_description=False: the description of every job is the whole payload.
    return SimpleWorker(
        [queue],
        connection=connection,
        serializer=JSONSerializer,
        name=worker_name,
        log_job_description=False,
    )


def worker_parser(settings: WorkerSettings) -> argparse.ArgumentParser:
    """Options of ``lacuna worker`` (``python -m workers``)."""
    parser = argparse.ArgumentParser(prog="lacuna worker", description=__doc__)
    parser.add_argument("--redis", default=settings.redis_url, help="Redis URL (LACUNA_REDIS_URL)")
    parser.add_argument("--queue", default=settings.queue, help="queue name (LACUNA_QUEUE)")
    parser.add_argument("--name", default=None, help="worker name shown in the registry")
    parser.add_argument("--burst", action="store_true", help="exit when the queue is empty")
    parser.add_argument("--log-level", default="INFO")
    return parser


def main(argv: list[str] | None = None) -> int:
    args = worker_parser(WorkerSettings()).parse_args(argv)
    logging.basicConfig(
        level=args.log_level, format="%(asctime)s %(name)s %(levelname)s %(message)s"
    )
    worker = build_worker(args.redis, args.queue, args.name)
    jobs.compute_process()  # fork the compute child now, after the heavy imports
    try:
        worker.work(burst=args.burst, logging_level=args.log_level, with_scheduler=False)
    finally:
        jobs.compute_process().close()
    return 0
