"""Prefer: wait never takes every thread: past ``max_waiters`` a request answers at once, so
/healthz and everything else keep a thread.

RFC 7240 section 4.3: ``wait`` is a preference, and a server may answer before the time is
up; the answer is then what the request would have got without waiting (a 202 with the job's
status for a submission, RFC 9110 section 15.3.3).
"""

import sys
import threading
from typing import Any

import numpy as np
import pytest
import requests

from service.app import create_app
from service.settings import Settings
from service.submissions import Submission
from tests.support.api import JOBS, WAIT, fresh_queue, post
from tests.support.bodies import rips_job
from tests.support.http_server import gunicorn_api
from tests.support.waiting import finishes, wait_until
from tests.support.worker_process import start_worker, stop_worker
from workers.spec import DistanceRequest, JobRequest


def test_past_the_waiter_cap_a_submission_answers_202_at_once(settings: Settings) -> None:
    app = create_app(settings.model_copy(update={"max_waiters": 1}))
    app.testing = True
    client = app.test_client()
    waiters = app.extensions["lacuna.gates"].waiters
    assert waiters.acquire(blocking=False)  # another request is waiting
    try:
        # No worker runs: a wait would last its 30 s; past the cap there is none.
        answer = finishes(lambda: post(client, JOBS, rips_job(), headers=WAIT), 25, "submit")
        assert answer.status_code == 202
        assert answer.get_json()["status"] == "queued"
        location = answer.headers["Location"]
        status = finishes(lambda: client.get(location, headers=WAIT), 25, "status")
        assert (status.status_code, status.get_json()["status"]) == (200, "queued")
        result = finishes(lambda: client.get(location + "/result", headers=WAIT), 25, "result")
        assert result.status_code == 409  # not finished, said at once
    finally:
        waiters.release()


def test_health_answers_while_more_requests_wait_than_the_cap(redis_url: str) -> None:
    queue = fresh_queue()
    threads, cap, waiting = 4, 2, 6  # more waiting requests than threads
    with gunicorn_api(redis_url, queue, threads=threads, LACUNA_MAX_WAITERS=str(cap)) as base:
        submitted = requests.post(base + JOBS, json=rips_job(), timeout=30)
        assert submitted.status_code == 202
        job = base + submitted.headers["Location"]
        answers: list[dict[str, Any]] = []

        def wait_for_job() -> None:
            answer = requests.get(job, headers=WAIT, timeout=120)
            answers.append(answer.json())

        clients = [threading.Thread(target=wait_for_job) for _ in range(waiting)]
        for client in clients:
            client.start()
        # Those past the cap answer the queued job at once; the cap's worth keep waiting
        # (nothing runs the job yet), and a thread is left for the health check.
        wait_until(lambda: len(answers) >= waiting - cap, 20, "the answers past the cap")
        health = requests.get(base + "/healthz", timeout=20)
        assert health.status_code == 200
        assert len(answers) == waiting - cap
        assert all(answer["status"] == "queued" for answer in answers)
        # A worker runs the job: the waiting requests end with it.
        worker = start_worker(redis_url, queue)
        try:
            for client in clients:
                client.join(120)
            assert len(answers) == waiting
            assert [a["status"] for a in answers[waiting - cap :]] == ["succeeded"] * cap
        finally:
            stop_worker(worker)


_BODY_TYPES = (JobRequest, DistanceRequest, Submission, np.ndarray)
"""What a decoded body is made of: its request model, its submission and its arrays."""


def _stack_locals(thread: threading.Thread) -> list[Any] | None:
    """The locals of every frame of ``thread`` once it waits in ``queue.wait``, else None."""
    frame = sys._current_frames().get(thread.ident or -1)
    frames = []
    while frame is not None:
        frames.append(frame)
        frame = frame.f_back
    if not any(
        f.f_code.co_name == "wait" and f.f_code.co_filename.endswith("queue.py") for f in frames
    ):
        return None
    return [value for f in frames for value in f.f_locals.values()]


# A large-parse slot (max_large_parses) bounds the memory of the bodies being handled: the
# slot is given back when the wait begins, so by then nothing of the body may be held.
@pytest.mark.parametrize(
    ("path", "body"),
    [
        (JOBS, rips_job()),
        ("/v1/distances", {"metric": "bottleneck", "diagrams": [[[0.0, 1.0]], [[0.0, 2.0]]]}),
    ],
    ids=["job", "distances"],
)
def test_a_waiting_submission_holds_nothing_of_its_body(
    settings: Settings, path: str, body: dict[str, Any]
) -> None:
    client = create_app(settings).test_client()
    answers: list[int] = []
    # No worker runs: the request waits its whole 10 s (ended early by nothing).
    thread = threading.Thread(
        target=lambda: answers.append(
            post(client, path, body, headers={"Prefer": "wait=10"}).status_code
        )
    )
    thread.start()
    held: list[Any] = []

    def waiting() -> bool:
        held[:] = _stack_locals(thread) or []
        return bool(held)

    wait_until(waiting, 20, "the request waits in queue.wait")
    kept = [value for value in held if isinstance(value, _BODY_TYPES)]
    assert kept == []
    thread.join(30)
    assert answers == [202]
