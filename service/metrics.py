"""``GET /metrics``: the Prometheus text exposition format, for operators.

It asks for no API key (a scraper has none): it shows counts, never jobs, ids or inputs, but
it is meant for the monitoring network, not for clients; an auth hook should let it through
and a proxy in front should keep it off the public side.

Two sources, merged per scrape:

- HTTP answers of this API (``lacuna_http_*``), counted by ``prometheus_client`` in the
  process that answered. Under gunicorn each worker process is its own: with
  ``PROMETHEUS_MULTIPROC_DIR`` set (``lacuna serve`` sets it) they write their counts to
  files there and every scrape adds up all of them (prometheus_client's multiprocess mode);
  ``service.gunicorn_config`` tidies after a worker process that exits.
- the queue, read from Redis at scrape time (``QueueCollector``): jobs waiting, jobs by
  state from RQ's registries, and what workers on any machine counted when jobs ended
  (``workers.metrics``; ``workers.spec.metrics`` says where).

Routes are labelled by their URL rule (``/v1/jobs/<job_id>``), never the path, so job ids
do not become label values.
"""

import logging
import os
import time
from collections import defaultdict
from collections.abc import Iterator

from flask import Blueprint, Flask, Response, current_app, g, request
from prometheus_client import CollectorRegistry, Counter, Histogram, generate_latest
from prometheus_client.core import CounterMetricFamily, GaugeMetricFamily, HistogramMetricFamily
from prometheus_client.exposition import CONTENT_TYPE_PLAIN_0_0_4
from prometheus_client.multiprocess import MultiProcessCollector
from prometheus_client.registry import Collector
from prometheus_client.utils import floatToGoString
from redis.exceptions import RedisError
from rq import Queue
from rq.utils import as_text

from workers.spec.jobs import JobState
from workers.spec.metrics import (
    DURATION_BUCKETS_S,
    MEMORY_LIMIT_REASON,
    cancelled_key,
    durations_key,
    failures_key,
)

__all__ = ["HTTP_DURATION", "HTTP_RESPONSES", "QueueCollector", "metrics", "register"]

log = logging.getLogger(__name__)

MULTIPROCESS_VARIABLE = "PROMETHEUS_MULTIPROC_DIR"

_METHODS = frozenset(("GET", "HEAD", "POST", "PUT", "PATCH", "DELETE", "OPTIONS"))
"""Methods kept as label values; any other is ``other`` (a client chooses the method)."""

_UNMATCHED = "unmatched"
"""Route label of a request that matched no URL rule (a 404 or a 405)."""

# Not in prometheus_client's default registry: a scrape builds its own (see scrape()).
HTTP_RESPONSES = Counter(
    "lacuna_http_responses",
    "HTTP answers by method, route (URL rule, not path) and status code.",
    ["method", "route", "status"],
    registry=None,
)
HTTP_DURATION = Histogram(
    "lacuna_http_request_duration_seconds",
    "Time from the request's arrival in the app to its answer, by method and route.",
    ["method", "route"],
    buckets=(0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0, 30.0, 60.0),
    registry=None,
)

metrics = Blueprint("metrics", __name__)


@metrics.get("/metrics")
def scrape() -> Response:
    """The Prometheus text format: this API's HTTP counts and the queue's state."""
    registry = CollectorRegistry(auto_describe=False)
    if os.environ.get(MULTIPROCESS_VARIABLE):
        MultiProcessCollector(registry)  # every gunicorn worker process's counts
    else:
        registry.register(HTTP_RESPONSES)
        registry.register(HTTP_DURATION)
    registry.register(QueueCollector(current_app.extensions["lacuna"].queue.queue))
    # Text format 0.0.4: what every Prometheus version reads (our names need no escaping).
    return Response(generate_latest(registry), content_type=CONTENT_TYPE_PLAIN_0_0_4)


def _started() -> None:
    g.metrics_started = time.perf_counter()


def _count(response: Response) -> Response:
    rule = request.url_rule
    route = rule.rule if rule is not None else _UNMATCHED
    method = request.method if request.method in _METHODS else "other"
    HTTP_RESPONSES.labels(method, route, str(response.status_code)).inc()
    started: float | None = g.get("metrics_started")
    if started is not None:  # None if a hook before ours answered
        HTTP_DURATION.labels(method, route).observe(time.perf_counter() - started)
    return response


def register(app: Flask) -> None:
    """Count every answer and serve /metrics; called once by the app factory."""
    app.before_request(_started)
    app.after_request(_count)
    app.register_blueprint(metrics)


class QueueCollector(Collector):
    """The queue's metrics, read from Redis when collected (one round trip, two with jobs
    cancelled while running)."""

    def __init__(self, queue: Queue) -> None:
        self.queue = queue

    def collect(self) -> Iterator[GaugeMetricFamily | CounterMetricFamily | HistogramMetricFamily]:
        up = GaugeMetricFamily("lacuna_redis_up", "1 if Redis answered this scrape, else 0.")
        try:
            families = self._families()
        except RedisError as error:
            log.warning("/metrics could not read the queue: %r", error)
            up.add_metric([], 0)
            yield up
            return
        up.add_metric([], 1)
        yield up
        yield from families

    def _families(
        self,
    ) -> list[GaugeMetricFamily | CounterMetricFamily | HistogramMetricFamily]:
        queue = self.queue
        redis = queue.connection
        now = time.time()
        registries = [
            queue.deferred_job_registry,
            queue.scheduled_job_registry,
            queue.started_job_registry,
            queue.finished_job_registry,
            queue.failed_job_registry,
            queue.canceled_job_registry,
        ]
        with redis.pipeline(transaction=False) as pipe:
            pipe.llen(queue.key)
            for registry in registries:  # entries are scored by when RQ forgets them
                pipe.zcount(registry.key, now, "+inf")
            pipe.zremrangebyscore(cancelled_key(queue.name), "-inf", now)
            pipe.zrange(cancelled_key(queue.name), 0, -1)
            pipe.hgetall(durations_key(queue.name))
            pipe.hgetall(failures_key(queue.name))
            answers = pipe.execute()
        waiting, deferred, scheduled, started, finished, failed, canceled = answers[:7]
        cancelled_ids, durations, failures = answers[8:]
        # RQ files a job cancelled while running as failed; workers list those it still keeps.
        cancelled_running = 0
        if cancelled_ids:
            scores = redis.zmscore(queue.failed_job_registry.key, cancelled_ids)
            cancelled_running = sum(1 for score in scores if score is not None and score >= now)

        depth = GaugeMetricFamily("lacuna_queue_depth", "Jobs waiting on the queue for a worker.")
        depth.add_metric([], waiting)
        states = GaugeMetricFamily(
            "lacuna_jobs",
            "Jobs Redis holds, by state (ended ones until their results expire).",
            labels=["state"],
        )
        for state, count in (
            (JobState.queued, waiting + deferred + scheduled),
            (JobState.running, started),
            (JobState.succeeded, finished),
            (JobState.failed, failed - cancelled_running),
            (JobState.cancelled, canceled + cancelled_running),
        ):
            states.add_metric([state.value], count)
        reasons = {as_text(k): int(v) for k, v in failures.items()}
        by_reason = CounterMetricFamily(
            "lacuna_job_failures",
            "Jobs that ended without a result, by reason (the problem kind).",
            labels=["reason"],
        )
        for reason, count in sorted(reasons.items()):
            by_reason.add_metric([reason], count)
        memory = CounterMetricFamily(
            "lacuna_job_memory_limit_kills",
            "Jobs whose computation was killed at its memory limit (also a failure reason).",
        )
        memory.add_metric([], reasons.get(MEMORY_LIMIT_REASON, 0))
        return [depth, states, _durations(durations), by_reason, memory]


def _durations(fields: dict[bytes, bytes]) -> HistogramMetricFamily:
    """The histogram from the workers' per-bucket counts (``workers.spec.metrics``)."""
    family = HistogramMetricFamily(
        "lacuna_job_duration_seconds",
        "Wall time of jobs from start to end on a worker, by task, input type and outcome.",
        labels=["task", "input", "outcome"],
    )
    counts: dict[tuple[str, ...], dict[str, float]] = defaultdict(dict)
    for field, value in fields.items():
        kind, _, part = as_text(field).rpartition("|")
        counts[tuple(kind.split("|"))][part] = float(value)
    # (field name the workers write, bucket label prometheus_client would write)
    bounds = [(repr(b), floatToGoString(b)) for b in DURATION_BUCKETS_S] + [("+Inf", "+Inf")]
    for labels, parts in sorted(counts.items()):
        if len(labels) != 3:
            continue
        total = 0.0
        buckets = []
        for stored, name in bounds:
            total += parts.get(stored, 0.0)
            buckets.append((name, total))
        family.add_metric(list(labels), buckets, parts.get("sum", 0.0))
    return family
