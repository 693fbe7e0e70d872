"""Job lifecycle through a real Redis and real worker processes."""

import math
import re
import subprocess
import time
from typing import Any

import numpy as np
import pytest
from flask.testing import FlaskClient
from rq.job import Job
from rq.serializers import JSONSerializer

from service.app import create_app
from service.settings import Settings
from tests.support.api import app_with, fresh_queue, status_once
from tests.support.bodies import PERSISTENCE_IMAGE_SPEC, rips_job
from tests.support.processes import children_of, process_state, running
from tests.support.waiting import finishes, wait_until
from tests.support.worker_process import start_worker, stop_worker
from workers.jobs import execute
from workers.spec import JobPayload
from workers.spec.arrays import from_npy_bytes
from workers.spec.jobs import input_key

# RFC 3339 section 5.6 date-time in UTC, with milliseconds, as the status answers it.
TIMESTAMP = re.compile(r"\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}\.\d{3}Z")


def heavy_body() -> dict[str, Any]:
    # H2 of 2000 random points in 3D: tens of seconds (the edge collapse of ~2M edges), so
    # it runs past the limits below; the test checks that the native loop is really stopped.
    points = np.random.default_rng(0).uniform(size=(2000, 3)).tolist()
    return rips_job(points, max_dim=2)


def compute_child(worker: subprocess.Popen[bytes]) -> int:
    """Pid of the worker's compute child (the runner forks it at start-up)."""
    children = children_of(worker.pid)
    assert len(children) == 1, children
    return children[0]


def patient(settings: Settings) -> FlaskClient:
    """A client of an app that honours ``Prefer: wait`` up to 600 s, so that a test can tell
    a wait that ended with its job from one that ran to the cap."""
    return app_with(**(settings.model_dump() | {"max_wait_s": 600})).test_client()


def test_submit_poll_fetch(client: FlaskClient, worker: subprocess.Popen[bytes]) -> None:
    answer = client.post("/v1/jobs", json=rips_job())
    assert answer.status_code == 202
    job_id = answer.get_json()["job_id"]
    assert answer.headers["Location"] == f"/v1/jobs/{job_id}"
    assert answer.get_json()["status"] in {"queued", "running", "succeeded"}
    status = status_once(client, job_id, {"succeeded", "failed"})
    assert status["status"] == "succeeded", status
    for moment in ("created_at", "started_at", "ended_at"):
        assert TIMESTAMP.fullmatch(status[moment]), status[moment]
    assert status["created_at"] <= status["started_at"] <= status["ended_at"]
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
    settings: Settings, worker: subprocess.Popen[bytes]
) -> None:
    # RFC 7240 wait applies to any request: a client can long-poll instead of polling.
    client = patient(settings)
    location = client.post("/v1/jobs", json=rips_job()).headers["Location"]
    result = client.get(location + "/result", headers={"Prefer": "wait=20"})
    assert result.status_code == 200  # the poll ended because the job ended
    assert len(result.get_json()["diagrams"]) == 2
    # The job has ended, so a long poll of it answers without waiting: asked to wait 600 s,
    # it answers within a tenth of that (the deadline bounds a hang, it is not the claim).
    status = finishes(
        lambda: client.get(location, headers={"Prefer": "wait=600"}).get_json(),
        60,
        "a long poll of an ended job",
    )
    assert status["status"] == "succeeded"


def test_prefer_wait_times_out_with_202(settings: Settings) -> None:
    # No worker: the job stays queued, so the wait can only end by running out. Asked for
    # 1 s by an app that allows 600 s, it ends with the 1 s asked for, not with the cap
    # (the 60 s deadline bounds a hang, it is not the claim).
    client = patient(settings)
    started = time.monotonic()
    answer = finishes(
        lambda: client.post("/v1/jobs", json=rips_job(), headers={"Prefer": "wait=1"}),
        60,
        "a submission asking to wait 1 s",
    )
    assert answer.status_code == 202
    assert answer.get_json()["status"] == "queued"
    # It did wait: a lower bound, which a busy machine can only make easier to meet.
    assert time.monotonic() - started >= 0.9


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
    assert answer.get_json()["ended_at"]  # cancelled while queued: it ended then
    later = client.post("/v1/jobs", json=rips_job()).get_json()["job_id"]
    assert settings.redis_url is not None
    worker = start_worker(settings.redis_url, settings.queue)
    try:
        # The queue is first in, first out: once the job queued after it has run, the worker
        # has passed the cancelled one, which must not have run.
        assert status_once(client, later, {"succeeded", "failed"})["status"] == "succeeded"
        assert client.get(f"/v1/jobs/{job_id}").get_json()["status"] == "cancelled"
        assert client.get(f"/v1/jobs/{job_id}/result").status_code == 409
        assert client.delete(f"/v1/jobs/{job_id}").status_code == 409
    finally:
        stop_worker(worker)


def test_cancel_running_job_stops_it(client: FlaskClient, worker: subprocess.Popen[bytes]) -> None:
    busy = compute_child(worker)
    job_id = client.post("/v1/jobs", json=heavy_body()).get_json()["job_id"]
    status_once(client, job_id, {"running"})
    # Cancel inside the computation, not before it starts: the compute child is running.
    wait_until(lambda: process_state(busy) == "R", 60, f"compute child {busy} computing")
    # Its one step before the result is the Rips reduction, shown without a made-up fraction.
    wait_until(
        lambda: client.get(f"/v1/jobs/{job_id}").get_json()["progress"] is not None,
        60,
        "the running job's progress",
    )
    progress = client.get(f"/v1/jobs/{job_id}").get_json()["progress"]
    assert progress == {"done": 0, "total": 2, "stage": "persistence"}
    page = client.get(f"/v1/jobs/{job_id}", headers={"Accept": "text/html"}).get_data(as_text=True)
    assert '<meta http-equiv="refresh" content="2">' in page
    assert '<progress id="progress" value="0" max="2">' in page
    assert "persistence (0 of 2 done)" in page
    assert client.delete(f"/v1/jobs/{job_id}").status_code in (200, 202)
    status = status_once(client, job_id, {"cancelled", "failed", "succeeded"})
    assert status["status"] == "cancelled"
    # It ended when it was cancelled, after it started (RFC 3339 with a Z, so they order as
    # text).
    assert status["started_at"] is not None and status["ended_at"] is not None
    assert status["started_at"] <= status["ended_at"]
    # Stopped, not left computing in the background: the child that ran it was killed (a
    # finished job leaves its child alive for the next one).
    wait_until(lambda: not running(busy), 60, f"compute child {busy} killed")
    # The same worker takes the next job: its compute process was replaced.
    follow = client.post("/v1/jobs", json=rips_job(), headers={"Prefer": "wait=10"})
    assert follow.status_code == 200


def test_time_limit_stops_native_code(redis_url: str) -> None:
    # refuse_costly_jobs=False: the estimate would refuse the job up front; the runtime
    # limit is what this tests.
    settings = Settings(
        redis_url=redis_url,
        queue=fresh_queue(),
        job_time_limit_s=1.0,
        refuse_costly_jobs=False,
        auth="open",
    )
    client = create_app(settings).test_client()
    worker = start_worker(redis_url, settings.queue)
    try:
        busy = compute_child(worker)
        job_id = client.post("/v1/jobs", json=heavy_body()).get_json()["job_id"]
        status = status_once(client, job_id, {"failed", "succeeded"})
        assert status["status"] == "failed"
        assert status["problem"]["type"] == "urn:lacuna:problem:time-limit"
        assert "time limit" in status["problem"]["detail"]
        # Killed at the limit, not let finish: the child that ran it is gone (a finished job
        # leaves its child alive for the next one). tests/workers/test_compute.py shows the
        # limit ending a job that never ends by itself.
        wait_until(lambda: not running(busy), 60, f"compute child {busy} killed")
        # 200 points: above the size that runs inline, so the follow-up needs a compute child.
        follow_up = rips_job(np.random.default_rng(1).uniform(size=(200, 2)).tolist())
        follow = client.post("/v1/jobs", json=follow_up, headers={"Prefer": "wait=10"})
        assert follow.status_code == 200
        # The overrunning child was killed and reaped: the worker has one compute child,
        # the fresh one that ran the follow-up job, and it is idle.
        fresh = compute_child(worker)
        assert fresh != busy
        assert process_state(fresh) in {"S", "I"}
    finally:
        stop_worker(worker)


def _queued(client: FlaskClient, body: dict[str, Any]) -> tuple[JobPayload, np.ndarray]:
    """The payload and stored input of ``body``, queued where no worker takes it."""
    answer = client.post("/v1/jobs", json=body)
    assert answer.status_code == 202, answer.get_data(as_text=True)
    queue = client.application.extensions["lacuna"].queue
    job = Job.fetch(answer.get_json()["job_id"], connection=queue.redis, serializer=JSONSerializer)
    return JobPayload.model_validate(job.args[0]), from_npy_bytes(
        queue.redis.get(input_key(job.id))
    )


_SUMMARY = {"type": "summary", "dim": 0}
_PATH = {
    "type": "graph",
    "nodes": [[0, 0], [1, 0], [1, 1], [2, 1]],
    "edges": [[0, 1], [1, 2], [2, 3]],
}
_SQUARE = [[0, 0, 0, 0], [0, 1, 1, 0], [0, 1, 1, 0], [0, 0, 0, 0]]


@pytest.mark.parametrize(
    ("body", "stages"),
    [
        (rips_job(), ["persistence", "result"]),
        (
            rips_job(
                np.random.default_rng(5).uniform(size=(30, 2)).tolist(),
                subsample={"method": "maxmin", "size": 10, "seed": 1},
                features=[_SUMMARY, PERSISTENCE_IMAGE_SPEC],
            ),
            ["subsample", "persistence", "features", "features", "result"],
        ),
        (
            {"input": {"type": "image", "values": _SQUARE}, "filtration": {"type": "cubical"}},
            ["persistence", "result"],
        ),
        (
            {"input": {"type": "mask", "values": _SQUARE}, "filtration": {"type": "distance"}},
            ["signed distance", "persistence", "result"],
        ),
        (
            {
                "input": {"type": "mask", "values": _SQUARE},
                "filtration": {"type": "height", "directions": 2},
                "features": [_SUMMARY],
            },
            [
                "heights, direction 1 of 2",
                "persistence, direction 1 of 2",
                "heights, direction 2 of 2",
                "persistence, direction 2 of 2",
                "features",
                "features",
                "result",
            ],
        ),
        (
            {
                "input": _PATH,
                "filtration": {"type": "geodesic", "seeds": [0]},
                "output": ["diagrams", "descriptors"],
            },
            ["network", "geodesic distance", "persistence", "descriptors", "result"],
        ),
        (
            {
                "input": {"type": "mask", "values": _SQUARE, "skeletonize": True},
                "filtration": {"type": "height", "direction": [1, 0]},
            },
            ["skeleton graph", "heights", "persistence", "result"],
        ),
        (
            {
                "input": {"type": "diagrams", "diagrams": [{"dim": 0, "pairs": [[0, 1]]}]},
                "features": [_SUMMARY],
            },
            ["diagrams", "features", "result"],
        ),
    ],
)
def test_every_persistence_job_reports_its_steps(
    client: FlaskClient, body: dict[str, Any], stages: list[str]
) -> None:
    payload, array = _queued(client, body)
    reports: list[tuple[int, int, str | None]] = []
    execute(
        payload,
        array,
        job_id="progress",
        report=lambda done, total, stage=None: reports.append((done, total, stage)),
    )
    # One report as each step begins (the steps before it are over), then all over; the
    # total is known from the first report on.
    total = len(stages)
    assert reports == [(done, total, stage) for done, stage in enumerate(stages)] + [
        (total, total, "done")
    ]
