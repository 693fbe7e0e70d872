"""A fault lab: a Redis of the test's own that it may stop, real workers it may kill, and the
API in process beside them, with short liveness settings so a death shows within seconds."""

import signal
import subprocess
import time
import uuid
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

import numpy as np
from flask.testing import FlaskClient
from redis import Redis
from rq.job import Job
from rq.serializers import JSONSerializer

from service.app import create_app
from service.settings import Settings
from tests.support.api import JOBS, call, fresh_queue, post
from tests.support.bodies import rips_job
from tests.support.processes import children_of, cpu_ticks
from tests.support.redis import RestartableRedis, restartable_redis_server
from tests.support.waiting import wait_until
from tests.support.worker_process import start_worker, stop_worker

HEARTBEAT_INTERVAL_S = 0.5
DEAD_AFTER_S = 3
"""The fault tests' liveness: a dead worker's job is requeued or failed within about
DEAD_AFTER_S + HEARTBEAT_INTERVAL_S (defaults: 30 s and 5 s)."""

LIVENESS_ENV = {
    "LACUNA_HEARTBEAT_INTERVAL_S": str(HEARTBEAT_INTERVAL_S),
    "LACUNA_DEAD_AFTER_S": str(DEAD_AFTER_S),
    "LACUNA_REDIS_BACKOFF_MAX_S": "1",
    "LACUNA_LOST_JOB_RETRIES": "1",
}

BOUND_S = 20 * (DEAD_AFTER_S + HEARTBEAT_INTERVAL_S)
"""Generous bound on a state transition that liveness drives: only a hung test reaches it."""


def slow_rips_job(seed: int = 0) -> dict[str, Any]:
    """A Rips job of several seconds here (1100 uniform points in the unit cube up to H2: about
    4 s on one core, measured), long enough to fault a worker or Redis while it computes."""
    points = np.random.default_rng(seed).uniform(size=(1100, 3))
    return rips_job(points.tolist(), max_dim=2)


class FaultLab:
    """One restartable Redis, the workers a test starts on it, and an app on the same queue."""

    def __init__(self, redis: RestartableRedis) -> None:
        self.redis = redis
        self.queue = fresh_queue()
        self.settings = Settings(
            redis_url=redis.url, queue=self.queue, dead_after_s=DEAD_AFTER_S, auth="open"
        )
        app = create_app(self.settings)
        app.testing = True
        self.client: FlaskClient = app.test_client()
        self.workers: dict[str, subprocess.Popen[bytes]] = {}

    def connection(self) -> Redis:
        return Redis.from_url(self.redis.url)

    def start_worker(self, name: str | None = None) -> str:
        """Start a worker (a fresh name unless given); returns its name once registered."""
        name = name or f"fault-{uuid.uuid4().hex[:8]}"
        self.workers[name] = start_worker(self.redis.url, self.queue, name=name, env=LIVENESS_ENV)
        return name

    def kill(self, name: str) -> None:
        """SIGKILL worker ``name`` (no chance to say goodbye) and reap the process."""
        process = self.workers.pop(name)
        process.send_signal(signal.SIGKILL)
        process.wait()

    def alive(self, name: str) -> bool:
        return self.workers[name].poll() is None

    def computing(self, name: str) -> bool:
        """Does worker ``name``'s compute child use CPU (over a fifth of a second)?"""
        children = children_of(self.workers[name].pid)
        before = sum(cpu_ticks(child) for child in children)
        time.sleep(0.2)
        return sum(cpu_ticks(child) for child in children) > before

    def submit(self, body: dict[str, Any]) -> str:
        response = post(self.client, JOBS, body)
        assert response.status_code == 202, response.get_data(as_text=True)
        job_id: str = response.get_json()["job_id"]
        return job_id

    def status(self, job_id: str) -> dict[str, Any]:
        answer: dict[str, Any] = call(self.client, "GET", f"{JOBS}/{job_id}").get_json()
        return answer

    def wait_for(self, job_id: str, states: set[str], timeout: float = BOUND_S) -> dict[str, Any]:
        """The job's status once it is in one of ``states`` (fails the test after ``timeout``)."""
        seen: dict[str, Any] = {}

        def reached() -> bool:
            seen.clear()
            seen.update(self.status(job_id))
            return seen["status"] in states

        wait_until(reached, timeout, lambda: f"job {job_id} in {sorted(states)}; last {seen}")
        return seen

    def job(self, job_id: str) -> Job:
        return Job.fetch(job_id, connection=self.connection(), serializer=JSONSerializer)

    def runner_of(self, job_id: str) -> str:
        """Name of the live worker running the job, once one of this lab's live workers runs
        it (after a kill, the job reads running on the dead one until it is reaped)."""
        seen: list[str | None] = [None]

        def on_a_live_worker() -> bool:
            job = self.job(job_id)
            seen[0] = job.worker_name
            return job.get_status(refresh=False) == "started" and job.worker_name in self.workers

        wait_until(
            on_a_live_worker, BOUND_S, lambda: f"job {job_id} running on a live worker, not {seen}"
        )
        assert seen[0] is not None
        return seen[0]

    def stop_all(self) -> None:
        for process in self.workers.values():
            stop_worker(process)
        self.workers.clear()


@contextmanager
def fault_lab() -> Iterator[FaultLab]:
    """A FaultLab, its workers stopped and its Redis removed at the end."""
    with restartable_redis_server() as redis:
        lab = FaultLab(redis)
        try:
            yield lab
        finally:
            lab.stop_all()


def ready_workers(lab: FaultLab) -> int:
    """Live workers as /readyz counts them (0 when it answers 503)."""
    answer = call(lab.client, "GET", "/readyz")
    return int(answer.get_json()["workers"]) if answer.status_code == 200 else 0
