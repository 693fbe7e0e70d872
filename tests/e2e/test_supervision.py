"""``lacuna serve`` keeps going when its children die, and keeps its data when Redis does.

Real processes throughout: each test starts a stack with its own embedded Redis and data
directory (never 6379), SIGKILLs children with kill(2) and talks HTTP to what is left.
"""

import math
import os
import signal
import threading
import uuid
from pathlib import Path
from typing import Any

import pytest
import requests
from redis import Redis
from rq import Worker

from tests.support.bodies import PERSISTENCE_IMAGE_SPEC, rips_job
from tests.support.ports import free_port
from tests.support.processes import descendants, running
from tests.support.stack import wait_ready
from tests.support.supervised import ServedStack
from tests.support.synthetic import noisy_circle
from tests.support.waiting import wait_until

pytestmark = [pytest.mark.e2e, pytest.mark.slow]

WAIT = {"Prefer": "wait=30"}

SPEC = PERSISTENCE_IMAGE_SPEC


def _hexagon_h2(answer: requests.Response) -> None:
    """Adamaszek & Adams 2017 (from memory): the regular hexagon's Rips H2 is [sqrt 3, 2]."""
    assert answer.status_code == 200, answer.text
    h2 = answer.json()["diagrams"][2]["pairs"]
    assert h2 == [[pytest.approx(math.sqrt(3), rel=1e-6), pytest.approx(2.0, rel=1e-6)]]


class _Prober(threading.Thread):
    """GET /healthz every 50 ms until stopped; counts answers and failures."""

    def __init__(self, base: str) -> None:
        super().__init__(daemon=True)
        self.base = base
        self.answered = 0
        self.failures: list[str] = []
        self.halt = threading.Event()

    def run(self) -> None:
        while not self.halt.wait(0.05):
            try:
                answer = requests.get(self.base + "/healthz", timeout=5)
            except requests.RequestException as error:
                self.failures.append(repr(error))
                continue
            if answer.status_code == 200:
                self.answered += 1
            else:
                self.failures.append(str(answer.status_code))


def _worker_names(url: str) -> set[str]:
    return {worker.name for worker in Worker.all(connection=Redis.from_url(url))}


def test_killed_workers_and_gunicorn_are_restarted(tmp_path: Path) -> None:
    stack = ServedStack(tmp_path / "data", free_port(), workers=2)
    try:
        wait_ready(stack.base, workers=2)
        before = _worker_names(stack.redis_url)
        first_http = stack.children("http")
        prober = _Prober(stack.base)
        prober.start()
        killed = set(stack.children("worker"))
        assert len(killed) == 2
        for pid in killed:
            os.kill(pid, signal.SIGKILL)
        stack.wait_for_lines("restarted (pid", 2, 60)
        wait_until(
            lambda: len(_worker_names(stack.redis_url) - before) >= 2,
            60,
            "two new workers registered",
            interval=0.1,
        )
        assert not killed & set(stack.children("worker"))
        _hexagon_h2(requests.post(stack.base + "/v1/jobs", json=rips_job(max_dim=2), headers=WAIT))
        prober.halt.set()
        prober.join()
        # The API answered throughout the worker deaths.
        assert prober.failures == [] and prober.answered > 0
        assert stack.count("was killed by SIGKILL; restarting") == 2

        # A killed gunicorn master leaves its workers holding the port: they are stopped.
        orphans = descendants(first_http[0])
        assert orphans
        stack.kill("http")
        stack.wait_for_lines("HTTP answering again", 1, 60)
        assert stack.children("http") != first_http
        wait_until(lambda: not any(running(pid) for pid in orphans), 30, "the old workers gone")
        _hexagon_h2(requests.post(stack.base + "/v1/jobs", json=rips_job(max_dim=2), headers=WAIT))
    finally:
        left = stack.stop(signal.SIGINT)
    assert left == set(), f"orphaned processes: {left}"
    assert stack.process.returncode == 0
    assert stack.lines()[-1] == "lacuna stopped"


Kept = tuple[dict[str, Any], dict[str, Any], tuple[str, str]]


def _keep_some_data(base: str) -> Kept:
    """Five results (job URL -> result), a registered spec's answer, and (Idempotency-Key,
    its job's Location)."""
    results: dict[str, Any] = {}
    for seed in range(5):
        body = rips_job(noisy_circle(40, seed).tolist(), max_dim=1)
        answer = requests.post(base + "/v1/jobs", json=body, headers=WAIT)
        assert answer.status_code == 200, answer.text
        results[answer.headers["Location"]] = answer.json()
    registered = requests.post(base + "/v1/feature-specs", json=SPEC)
    assert registered.status_code == 200, registered.text
    key = str(uuid.uuid4())
    keyed = requests.post(
        base + "/v1/jobs", json=rips_job(), headers={**WAIT, "Idempotency-Key": key}
    )
    assert keyed.status_code == 200, keyed.text
    return results, registered.json(), (key, keyed.headers["Location"])


def _still_there(base: str, kept: Kept) -> None:
    results, spec, (key, location) = kept
    for job, result in results.items():
        answer = requests.get(base + job + "/result")
        assert answer.status_code == 200, answer.text
        assert answer.json() == result
    found = requests.get(f"{base}/v1/feature-specs/{spec['spec_id']}")
    assert found.status_code == 200, found.text
    assert found.json() == spec
    again = requests.post(
        base + "/v1/jobs", json=rips_job(), headers={**WAIT, "Idempotency-Key": key}
    )
    assert again.status_code in (200, 202), again.text
    assert again.headers["Location"] == location  # the same job, not a second one
    assert requests.get(base + location).json()["status"] == "succeeded"


def test_data_survive_a_killed_redis_and_a_restarted_stack(tmp_path: Path) -> None:
    data_dir = tmp_path / "data"
    stack = ServedStack(data_dir, free_port(), workers=1)
    try:
        wait_ready(stack.base)
        kept = _keep_some_data(stack.base)
        killed = stack.kill("redis")
        stack.wait_for_lines("embedded Redis restarted", 1, 60)
        assert stack.children("redis") and killed not in stack.children("redis")
        _still_there(stack.base, kept)
    finally:
        left = stack.stop(signal.SIGTERM)
    assert left == set(), f"orphaned processes: {left}"
    assert (data_dir / "appendonly.aof").stat().st_size > 0

    again = ServedStack(data_dir, free_port(), workers=1)
    try:
        wait_ready(again.base)
        assert f"data directory {data_dir}" in again.lines()[0]
        _still_there(again.base, kept)
    finally:
        assert again.stop(signal.SIGTERM) == set()


def test_a_second_stack_on_one_data_directory_is_refused(tmp_path: Path) -> None:
    first = ServedStack(tmp_path / "data", free_port(), workers=0)
    try:
        wait_until(lambda: first.count("lacuna is up") == 1, 60, "the first stack up")
        second = ServedStack(tmp_path / "data", free_port(), workers=0)
        assert second.process.wait(60) != 0
        second.stop()
        assert any("another lacuna serve is using" in line for line in second.lines())
        assert requests.get(first.base + "/healthz").status_code == 200  # left alone
    finally:
        assert first.stop() == set()
