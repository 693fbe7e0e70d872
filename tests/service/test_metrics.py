"""/metrics: the Prometheus text format, read back with prometheus_client's own parser (the
reference implementation of the format), and counts that move as real jobs end."""

import os
import signal
import subprocess
import uuid
from pathlib import Path

import numpy as np
import pytest
import requests
from flask.testing import FlaskClient
from prometheus_client.parser import text_string_to_metric_families
from redis import Redis
from rq import Queue
from rq.serializers import JSONSerializer

from service.metrics import MULTIPROCESS_VARIABLE
from service.settings import Settings
from tests.support.api import WAIT, app_with, call, fresh_queue, post, status_once
from tests.support.bodies import rips_job
from tests.support.gunicorn import running_gunicorn
from tests.support.ports import free_port
from tests.support.processes import descendants
from tests.support.redis import E2E_DB, with_database
from tests.support.stack import LACUNA, stop, wait_ready
from tests.support.waiting import wait_until
from tests.support.worker_process import start_worker, stop_worker
from workers import metrics as worker_metrics
from workers.spec.jobs import input_key
from workers.spec.problems import PROBLEM_TYPE

Samples = dict[tuple[str, tuple[tuple[str, str], ...]], float]


def parse(text: str) -> Samples:
    """Every sample of an exposition, keyed by (name, sorted labels); the parser raises on
    anything that is not the text format."""
    samples: Samples = {}
    for family in text_string_to_metric_families(text):
        for sample in family.samples:
            key = (sample.name, tuple(sorted(sample.labels.items())))
            assert key not in samples, f"sample {key} twice"
            samples[key] = sample.value
    return samples


def scrape(client: FlaskClient) -> Samples:
    answer = call(client, "GET", "/metrics")
    assert answer.status_code == 200
    assert answer.mimetype == "text/plain"
    return parse(answer.get_data(as_text=True))


def value(samples: Samples, name: str, **labels: str) -> float:
    return samples.get((name, tuple(sorted(labels.items()))), 0.0)


def test_metrics_parse_and_follow_jobs(client: FlaskClient, settings: Settings) -> None:
    before = scrape(client)
    assert value(before, "lacuna_redis_up") == 1
    ids = [post(client, "/v1/jobs", rips_job()).get_json()["job_id"] for _ in range(3)]
    waiting = scrape(client)  # no worker yet: all three wait
    assert value(waiting, "lacuna_queue_depth") == 3
    assert value(waiting, "lacuna_jobs", state="queued") == 3
    # One job loses its input before a worker takes it: it fails with input-expired.
    client.application.extensions["lacuna"].queue.redis.delete(input_key(ids[2]))
    assert settings.redis_url is not None
    worker = start_worker(settings.redis_url, settings.queue)
    try:
        ended = [status_once(client, job_id, {"succeeded", "failed"})["status"] for job_id in ids]
    finally:
        stop_worker(worker)
    assert ended == ["succeeded", "succeeded", "failed"]
    after = scrape(client)
    assert value(after, "lacuna_queue_depth") == 0
    states = {s: value(after, "lacuna_jobs", state=s) for s in ("queued", "running")}
    assert states == {"queued": 0, "running": 0}
    assert value(after, "lacuna_jobs", state="succeeded") == 2
    assert value(after, "lacuna_jobs", state="failed") == 1
    assert value(after, "lacuna_job_failures_total", reason="input-expired") == 1
    succeeded = {"task": "persistence", "input": "points", "outcome": "succeeded"}
    count = value(after, "lacuna_job_duration_seconds_count", **succeeded)
    assert count == 2
    # Text format: cumulative buckets, never decreasing, +Inf equal to the count.
    buckets = sorted(
        (float(dict(labels)["le"]), v)
        for (name, labels), v in after.items()
        if name == "lacuna_job_duration_seconds_bucket"
        and {k: v for k, v in labels if k != "le"} == succeeded
    )
    assert buckets[-1] == (float("inf"), count)
    assert all(a[1] <= b[1] for a, b in zip(buckets, buckets[1:], strict=False))
    assert value(after, "lacuna_job_duration_seconds_sum", **succeeded) > 0
    posted = {"method": "POST", "route": "/v1/jobs", "status": "202"}
    assert (
        value(after, "lacuna_http_responses_total", **posted)
        - value(before, "lacuna_http_responses_total", **posted)
        == 3
    )


def test_cancelled_while_running_counts_as_cancelled(
    client: FlaskClient, worker: subprocess.Popen[bytes]
) -> None:
    # H2 of 2000 random points in 3D runs for tens of seconds: long enough to be cancelled.
    points = np.random.default_rng(0).uniform(size=(2000, 3)).tolist()
    job_id = post(client, "/v1/jobs", rips_job(points, max_dim=2)).get_json()["job_id"]
    status_once(client, job_id, {"running"})
    assert value(scrape(client), "lacuna_jobs", state="running") == 1
    assert call(client, "DELETE", f"/v1/jobs/{job_id}").status_code in (200, 202)
    status_once(client, job_id, {"cancelled"})
    samples = scrape(client)
    # RQ files it as failed; the API and /metrics both call it cancelled.
    assert value(samples, "lacuna_jobs", state="cancelled") == 1
    assert value(samples, "lacuna_jobs", state="failed") == 0
    assert value(samples, "lacuna_job_failures_total", reason="cancelled") == 1
    labels = {"task": "persistence", "input": "points", "outcome": "cancelled"}
    assert value(samples, "lacuna_job_duration_seconds_count", **labels) == 1


def test_memory_limit_kill_is_a_failure_reason_and_a_counter(
    client: FlaskClient, settings: Settings
) -> None:
    # The compute child killed at its memory limit stores the problem kind "memory-limit";
    # the failure callback RQ runs then is called here as RQ calls it, on a real job.
    job_id = post(client, "/v1/jobs", rips_job()).get_json()["job_id"]
    redis = Redis.from_url(settings.redis_url or "")
    job = Queue(settings.queue, connection=redis, serializer=JSONSerializer).fetch_job(job_id)
    assert job is not None
    job.meta["problem"] = {"type": PROBLEM_TYPE + "memory-limit", "title": "t", "status": 507}
    before = scrape(client)
    assert value(before, "lacuna_job_memory_limit_kills_total") == 0
    worker_metrics.job_failed(job, redis, MemoryError, MemoryError(), None)
    after = scrape(client)
    assert value(after, "lacuna_job_memory_limit_kills_total") == 1
    assert value(after, "lacuna_job_failures_total", reason="memory-limit") == 1
    labels = {"task": "persistence", "input": "points", "outcome": "failed"}
    assert value(after, "lacuna_job_duration_seconds_count", **labels) == 1


def test_routes_are_labelled_by_rule_not_path(client: FlaskClient) -> None:
    job_id = str(uuid.uuid4())
    assert call(client, "GET", f"/v1/jobs/{job_id}").status_code == 404
    assert call(client, "GET", f"/no/such/{job_id}").status_code == 404
    assert call(client, "BREW", "/healthz").status_code == 405
    text = call(client, "GET", "/metrics").get_data(as_text=True)
    assert job_id not in text
    samples = parse(text)
    for route, method in (("/v1/jobs/<job_id>", "GET"), ("unmatched", "GET")):
        labels = {"method": method, "route": route, "status": "404"}
        assert value(samples, "lacuna_http_responses_total", **labels) >= 1, route
    other = {"method": "other", "route": "unmatched", "status": "405"}
    assert value(samples, "lacuna_http_responses_total", **other) >= 1
    assert (
        value(
            samples,
            "lacuna_http_request_duration_seconds_count",
            method="GET",
            route="/v1/jobs/<job_id>",
        )
        >= 1
    )


def test_metrics_answer_without_redis() -> None:
    # Nothing listens on port 1: the queue's part is missing, the answer says so, not a 503.
    client = app_with(redis_url="redis://127.0.0.1:1/0", queue=fresh_queue()).test_client()
    samples = scrape(client)
    assert value(samples, "lacuna_redis_up") == 0
    assert not any(name == "lacuna_queue_depth" for name, _ in samples)


def test_gunicorn_processes_add_up(redis_url: str, tmp_path: Path) -> None:
    # Two gunicorn worker processes each count what they answer in their own file
    # (prometheus_client's multiprocess mode); a scrape, whichever process takes it, adds
    # up both, so once both have answered every scrape shows the exact total.
    folder = tmp_path / "metrics"
    with running_gunicorn(redis_url, fresh_queue(), tmp_path, http_workers=2) as (base, _):
        sent = 0

        def both_answered() -> bool:
            nonlocal sent
            answer = requests.get(base + "/v1/capabilities", timeout=10)
            assert answer.status_code == 200
            sent += 1
            return len(list(folder.glob("counter_*.db"))) == 2

        wait_until(both_answered, 60, "both gunicorn processes answering", interval=0)
        capabilities = {"method": "GET", "route": "/v1/capabilities", "status": "200"}
        for _ in range(6):
            scraped = requests.get(base + "/metrics", timeout=10)
            assert scraped.status_code == 200
            assert value(parse(scraped.text), "lacuna_http_responses_total", **capabilities) == sent


@pytest.mark.e2e
@pytest.mark.slow  # about 11 s: a whole stack starts and stops
def test_lacuna_serve_counts_in_a_private_folder_it_removes(redis_server: str) -> None:
    # `lacuna serve` runs gunicorn in multiprocess mode on a folder of its own: seen in
    # gunicorn's environment while it runs, gone once the stack has stopped.
    url = with_database(redis_server, E2E_DB)
    Redis.from_url(url).flushdb()
    port = free_port()
    env = dict(os.environ, LACUNA_QUEUE=fresh_queue())
    command = [LACUNA, "serve", "--redis", url, "--port", str(port), "--local-workers", "1"]
    process = subprocess.Popen(command, env=env, stdout=subprocess.DEVNULL)
    base = f"http://127.0.0.1:{port}"
    try:
        wait_ready(base, workers=1)
        folders = {_environment(pid).get(MULTIPROCESS_VARIABLE) for pid in descendants(process.pid)}
        folders.discard(None)
        assert len(folders) == 1, folders  # gunicorn's master and worker share one
        folder = Path(str(folders.pop()))
        assert folder.is_dir()
        answer = requests.post(base + "/v1/jobs", json=rips_job(), headers=WAIT, timeout=60)
        assert answer.status_code == 200, answer.text
        samples = parse(requests.get(base + "/metrics", timeout=10).text)
        labels = {"task": "persistence", "input": "points", "outcome": "succeeded"}
        assert value(samples, "lacuna_job_duration_seconds_count", **labels) == 1
        posted = {"method": "POST", "route": "/v1/jobs", "status": "200"}
        assert value(samples, "lacuna_http_responses_total", **posted) == 1
        assert list(folder.glob("counter_*.db"))  # counted in the folder, not in memory
    finally:
        stop(process, signal.SIGTERM)
    assert not folder.exists()


def _environment(pid: int) -> dict[str, str]:
    try:
        raw = Path(f"/proc/{pid}/environ").read_bytes()
    except OSError:  # ended meanwhile
        return {}
    pairs = (item.split(b"=", 1) for item in raw.split(b"\0") if b"=" in item)
    return {key.decode(): value.decode(errors="replace") for key, value in pairs}
