"""The compute child: results over the pipe, and a time limit that really kills native code."""

import ctypes
import os
from collections.abc import Iterator

import numpy as np
import pytest

from tests.support.bodies import rips_payload
from tests.support.processes import running
from tests.support.waiting import finishes, wait_until
from workers.compute import ComputeProcess, JobAborted, Report
from workers.jobs import execute_bytes
from workers.spec import JobPayload
from workers.spec.arrays import to_npy_bytes


def payload(points: np.ndarray, max_dim: int) -> JobPayload:
    return rips_payload(points, max_dim=max_dim, time_limit_s=1)


@pytest.fixture
def compute() -> Iterator[ComputeProcess]:
    process = ComputeProcess(execute_bytes)
    yield process
    process.close()


def run(compute: ComputeProcess, points: np.ndarray, max_dim: int, limit: float) -> dict:
    return compute.run(
        job_id="job",
        payload=payload(points, max_dim),
        input_bytes=to_npy_bytes(points),
        time_limit_s=limit,
        should_stop=lambda: False,
    )


def test_result_comes_back_over_the_pipe(compute: ComputeProcess) -> None:
    # 3-4-5 right triangle (Pythagoras): the two points merge at distance 5.
    points = np.array([[0.0, 0.0], [3.0, 4.0]])
    result = run(compute, points, max_dim=0, limit=10)
    assert result["diagrams"][0]["pairs"] == [[0.0, 5.0], [0.0, None]]


def test_time_limit_kills_the_native_loop(compute: ComputeProcess) -> None:
    heavy = np.random.default_rng(0).uniform(size=(2000, 3))  # H2: tens of seconds
    old_pid = compute.pid
    assert old_pid is not None
    with pytest.raises(JobAborted) as aborted:
        run(compute, heavy, max_dim=2, limit=0.5)
    assert aborted.value.problem.type == "urn:lacuna:problem:time-limit"
    assert not running(old_pid)  # SIGKILLed, not left computing in the background
    assert compute.pid is None  # the next job forks a fresh child
    small = np.array([[0.0], [2.0]])  # on a line, the two points merge at distance 2
    assert run(compute, small, max_dim=0, limit=10)["diagrams"][0]["pairs"][0] == [0.0, 2.0]
    assert compute.pid not in (None, old_pid)


def _never_returns(header: dict, data: bytes, report: Report) -> dict:
    """A job that cannot end by itself: it blocks in C (libc pause()), where no Python
    exception reaches it; only a signal that kills ends it."""
    libc = ctypes.CDLL(None)
    while True:
        libc.pause()


def test_time_limit_ends_a_job_that_never_ends() -> None:
    # The job never returns, so the run can only end because the limit killed its child:
    # the time-limit problem shows the limit fired (the 60 s deadline bounds a hang).
    endless = ComputeProcess(_never_returns)
    try:
        pid = endless.pid
        assert pid is not None
        with pytest.raises(JobAborted) as aborted:
            finishes(
                lambda: run(endless, np.zeros((2, 2)), max_dim=0, limit=0.5),
                60,
                "a never-ending job under a 0.5 s limit",
            )
        assert aborted.value.problem.type == "urn:lacuna:problem:time-limit"
        assert not running(pid)
    finally:
        endless.close()


def _exit_mid_job(header: dict, data: bytes, report: Report) -> dict:
    os._exit(3)  # what an out-of-memory kill or a segfault looks like from outside


def test_crash_during_a_job_is_reported() -> None:
    crashing = ComputeProcess(_exit_mid_job)
    try:
        with pytest.raises(JobAborted) as aborted:
            run(crashing, np.zeros((2, 2)), max_dim=0, limit=5)
        assert aborted.value.problem.type == "urn:lacuna:problem:compute-crashed"
        assert "exit code 3" in (aborted.value.problem.detail or "")
    finally:
        crashing.close()


def test_child_that_died_between_jobs_is_replaced(compute: ComputeProcess) -> None:
    pid = compute.pid
    assert pid is not None
    os.kill(pid, 9)
    wait_until(lambda: not running(pid), 30, f"killed compute child {pid} gone")
    # Two coincident points: their merge has zero length and is dropped; one class remains.
    pairs = run(compute, np.zeros((2, 2)), max_dim=0, limit=5)["diagrams"][0]["pairs"]
    assert pairs == [[0.0, None]]
    assert compute.pid not in (None, pid)
