"""Job lifecycle through a real Redis and real worker processes."""

import math
import subprocess
import time
import uuid
from typing import Any

import numpy as np
import pytest
from flask.testing import FlaskClient
from rq.job import Job
from rq.serializers import JSONSerializer

from service.app import create_app
from service.settings import Settings
from tests.support.bodies import rips_job
from tests.support.processes import children_of, process_state
from tests.support.worker_process import start_worker, stop_worker
from workers.jobs import execute
from workers.spec import JobPayload


def heavy_body() -> dict[str, Any]:
    # H2 of 2000 random points in 3D: tens of seconds (the edge collapse of ~2M edges), so
    # it runs past the limits below; the test checks that the native loop is really stopped.
    points = np.random.default_rng(0).uniform(size=(2000, 3)).tolist()
    return rips_job(points, max_dim=2)


def wait_for(client: FlaskClient, job_id: str, states: set[str], seconds: float = 20) -> dict:
    deadline = time.monotonic() + seconds
    while True:
        status = client.get(f"/v1/jobs/{job_id}").get_json()
        if status["status"] in states or time.monotonic() > deadline:
            return status
        time.sleep(0.05)


def test_submit_poll_fetch(client: FlaskClient, worker: subprocess.Popen[bytes]) -> None:
    answer = client.post("/v1/jobs", json=rips_job())
    assert answer.status_code == 202
    job_id = answer.get_json()["job_id"]
    assert answer.headers["Location"] == f"/v1/jobs/{job_id}"
    assert answer.get_json()["status"] in {"queued", "running", "succeeded"}
    status = wait_for(client, job_id, {"succeeded", "failed"})
    assert status["status"] == "succeeded", status
    assert status["created_at"] and status["started_at"] and status["ended_at"]
    assert status["links"]["result"] == f"/v1/jobs/{job_id}/result"
    result = client.get(f"/v1/jobs/{job_id}/result").get_json()
    assert result["job_id"] == job_id
    assert result["value_convention"] == "edge_length"
    # Same closed form as tests/core (Adamaszek & Adams 2017, from memory): H1 = [1, sqrt 3].
    h1 = result["diagrams"][1]["pairs"]
    assert h1 == [[pytest.approx(1.0, rel=1e-6), pytest.approx(math.sqrt(3), rel=1e-6)]]
    assert result["diagrams"][0]["pairs"][-1] == [0.0, None]  # essential class: null death


def test_prefer_wait_answers_inline(client: FlaskClient, worker: subprocess.Popen[bytes]) -> None:
    answer = client.post("/v1/jobs", json=rips_job(units="um"), headers={"Prefer": "wait=20"})
    assert answer.status_code == 200
    result = answer.get_json()
    assert result["units"] == "um"
    assert answer.headers["Location"] == f"/v1/jobs/{result['job_id']}"
    assert client.get(f"/v1/jobs/{result['job_id']}").get_json()["status"] == "succeeded"


def test_prefer_wait_on_result_and_status(
    client: FlaskClient, worker: subprocess.Popen[bytes]
) -> None:
    # RFC 7240 wait applies to any request: a client can long-poll instead of polling.
    location = client.post("/v1/jobs", json=rips_job()).headers["Location"]
    result = client.get(location + "/result", headers={"Prefer": "wait=20"})
    assert result.status_code == 200
    assert len(result.get_json()["diagrams"]) == 2
    started = time.monotonic()
    status = client.get(location, headers={"Prefer": "wait=20"}).get_json()
    assert status["status"] == "succeeded"
    assert time.monotonic() - started < 1  # an ended job answers at once


def test_prefer_wait_times_out_with_202(client: FlaskClient) -> None:
    started = time.monotonic()
    answer = client.post("/v1/jobs", json=rips_job(), headers={"Prefer": "wait=1"})
    assert answer.status_code == 202  # no worker: the job is still queued after 1 s
    assert answer.get_json()["status"] == "queued"
    assert 0.9 <= time.monotonic() - started < 5


def test_worker_result_equals_inline(
    client: FlaskClient, worker: subprocess.Popen[bytes], settings: Settings
) -> None:
    points = np.random.default_rng(3).normal(size=(150, 3))
    body = rips_job(points.tolist(), subsample={"method": "maxmin", "size": 80, "seed": 4})
    result = client.post("/v1/jobs", json=body, headers={"Prefer": "wait=20"}).get_json()
    queue = client.application.extensions["lacuna"].queue
    job = Job.fetch(result["job_id"], connection=queue.redis, serializer=JSONSerializer)
    inline = execute(JobPayload.model_validate(job.args[0]), points, job_id=result["job_id"])
    assert len(result["provenance"]["subsample_indices"]) == 80
    for answer in (result, inline):
        answer["provenance"].pop("elapsed_s")
    assert result == inline


def test_cancel_queued_job(client: FlaskClient, settings: Settings) -> None:
    job_id = client.post("/v1/jobs", json=rips_job()).get_json()["job_id"]
    answer = client.delete(f"/v1/jobs/{job_id}")
    assert answer.status_code == 200
    assert answer.get_json()["status"] == "cancelled"
    assert settings.redis_url is not None
    worker = start_worker(settings.redis_url, settings.queue)
    try:
        time.sleep(1.0)  # a worker now listens; the cancelled job must not run
        assert client.get(f"/v1/jobs/{job_id}").get_json()["status"] == "cancelled"
        assert client.get(f"/v1/jobs/{job_id}/result").status_code == 409
        assert client.delete(f"/v1/jobs/{job_id}").status_code == 409
    finally:
        stop_worker(worker)


def test_cancel_running_job_stops_it(client: FlaskClient, worker: subprocess.Popen[bytes]) -> None:
    job_id = client.post("/v1/jobs", json=heavy_body()).get_json()["job_id"]
    assert wait_for(client, job_id, {"running"})["status"] == "running"
    time.sleep(0.3)
    asked = time.monotonic()
    assert client.delete(f"/v1/jobs/{job_id}").status_code in (200, 202)
    status = wait_for(client, job_id, {"cancelled", "failed", "succeeded"})
    assert status["status"] == "cancelled"
    assert time.monotonic() - asked < 3
    # The same worker takes the next job at once: its compute process was replaced.
    follow = client.post("/v1/jobs", json=rips_job(), headers={"Prefer": "wait=10"})
    assert follow.status_code == 200


def test_time_limit_stops_native_code(redis_url: str) -> None:
    settings = Settings(
        redis_url=redis_url, queue=f"test-{uuid.uuid4().hex[:12]}", job_time_limit_s=1.0
    )
    client = create_app(settings).test_client()
    worker = start_worker(redis_url, settings.queue)
    try:
        started = time.monotonic()
        job_id = client.post("/v1/jobs", json=heavy_body()).get_json()["job_id"]
        status = wait_for(client, job_id, {"failed", "succeeded"}, seconds=30)
        assert status["status"] == "failed"
        assert status["problem"]["type"] == "urn:lacuna:problem:time-limit"
        assert "time limit" in status["problem"]["detail"]
        assert time.monotonic() - started < 6
        # 200 points: above the size that runs inline, so the follow-up needs a compute child.
        follow_up = rips_job(np.random.default_rng(1).uniform(size=(200, 2)).tolist())
        follow = client.post("/v1/jobs", json=follow_up, headers={"Prefer": "wait=10"})
        assert follow.status_code == 200
        # The overrunning child was killed and reaped: the worker has one compute child,
        # the fresh one that ran the follow-up job, and it is idle.
        children = children_of(worker.pid)
        assert len(children) == 1
        assert process_state(children[0]) in {"S", "I"}
    finally:
        stop_worker(worker)
