"""Redis goes away while a worker computes, and comes back on the same port with its data."""

import signal
import time

import numpy as np
import pytest

from tests.support.api import JOBS, call
from tests.support.bodies import rips_job
from tests.support.faults import BOUND_S, FaultLab, ready_workers, slow_rips_job
from tests.support.waiting import wait_until

pytestmark = pytest.mark.slow

OUTAGE_S = 3.0
"""How long Redis stays away: the fault itself, not a claim about speed."""


def test_a_job_computing_through_an_outage_succeeds_and_the_worker_goes_on(lab: FaultLab) -> None:
    worker = lab.start_worker()
    job_id = lab.submit(slow_rips_job())
    lab.runner_of(job_id)
    wait_until(lambda: lab.computing(worker), BOUND_S, "the computation under way")

    lab.redis.stop()
    time.sleep(OUTAGE_S)  # the outage (nothing is asserted about its length)
    lab.redis.start()

    ended = lab.wait_for(job_id, {"succeeded", "failed"})
    # The cancel check and progress skip Redis while it is away; the worker stores the result
    # once it is back and takes the next job.
    assert ended["status"] == "succeeded", ended
    assert lab.alive(worker)
    assert lab.job(job_id).meta.get("lost_attempts") is None  # not run twice

    after = lab.submit(rips_job())  # the hexagon
    assert lab.wait_for(after, {"succeeded", "failed"})["status"] == "succeeded"
    assert lab.job(after).worker_name == worker


def test_a_result_computed_while_redis_is_away_is_stored_once_it_is_back(lab: FaultLab) -> None:
    worker = lab.start_worker()
    job_id = lab.submit(slow_rips_job(seed=2))
    lab.runner_of(job_id)
    wait_until(lambda: lab.computing(worker), BOUND_S, "the computation under way")
    lab.redis.stop()
    # The computation ends with nowhere to store its result; the worker holds it.
    wait_until(lambda: not lab.computing(worker), BOUND_S, "the computation ended")
    assert lab.alive(worker)
    lab.redis.start()

    ended = lab.wait_for(job_id, {"succeeded", "failed"})
    assert ended["status"] == "succeeded", ended
    result = call(lab.client, "GET", f"{JOBS}/{job_id}/result")
    assert result.status_code == 200
    assert lab.job(job_id).meta.get("lost_attempts") is None  # stored, not run again


def test_an_idle_worker_outlives_an_outage_and_registers_again(lab: FaultLab) -> None:
    worker = lab.start_worker()
    lab.redis.stop()
    time.sleep(OUTAGE_S)
    lab.redis.start()
    # Its registration may have lapsed meanwhile; the next heartbeat writes it again.
    wait_until(lambda: ready_workers(lab) == 1, 60, "/readyz counting the worker again")
    job_id = lab.submit(rips_job())
    assert lab.wait_for(job_id, {"succeeded", "failed"})["status"] == "succeeded"
    assert lab.alive(worker)


def test_a_worker_registers_again_after_redis_restarts_empty(lab: FaultLab) -> None:
    worker = lab.start_worker()
    lab.redis.stop()
    lab.redis.forget()  # a Redis without persistence: every registration is gone
    lab.redis.start()
    # The next heartbeat finds its registration gone and writes it again, so /readyz counts it.
    wait_until(lambda: ready_workers(lab) == 1, 60, "/readyz counting the worker again")
    job_id = lab.submit(rips_job())
    assert lab.wait_for(job_id, {"succeeded", "failed"})["status"] == "succeeded"
    assert lab.job(job_id).worker_name == worker


REDIS_PY_RETRIES_S = 8.0
"""Longer than redis-py's own retries of a refused command (3 retries, waits of at most 1, 2
and 4 s: redis-py's default ``Retry(ExponentialWithJitterBackoff(base=1, cap=10), 3)``), so
a write made when the stop is asked has given up before Redis comes back."""


def test_a_stop_asked_while_redis_is_away_lets_the_computation_finish(lab: FaultLab) -> None:
    worker = lab.start_worker()
    # 1800 uniform points in the unit cube up to H2: well over REDIS_PY_RETRIES_S here (1600
    # points took about 11 s, measured).
    points = np.random.default_rng(4).uniform(size=(1800, 3))
    job_id = lab.submit(rips_job(points.tolist(), max_dim=2))
    lab.runner_of(job_id)
    wait_until(lambda: lab.computing(worker), BOUND_S, "the computation under way")
    lab.redis.stop()
    lab.workers[worker].send_signal(signal.SIGTERM)  # a warm stop: finish the job first
    time.sleep(REDIS_PY_RETRIES_S)
    # RQ records the stop request in Redis from its signal handler; the child computes on.
    assert lab.computing(worker), "the stop request during the outage ended the computation"
    lab.redis.start()

    ended = lab.wait_for(job_id, {"succeeded", "failed"})
    assert ended["status"] == "succeeded", ended
    assert lab.job(job_id).meta.get("lost_attempts") is None  # this worker stored it
    lab.workers[worker].wait(timeout=BOUND_S)  # and then stopped


def test_a_worker_holding_a_result_while_redis_is_away_stops_on_the_first_sigterm(
    lab: FaultLab,
) -> None:
    worker = lab.start_worker()
    job_id = lab.submit(slow_rips_job(seed=3))
    lab.runner_of(job_id)
    wait_until(lambda: lab.computing(worker), BOUND_S, "the computation under way")
    lab.redis.stop()
    wait_until(lambda: not lab.computing(worker), BOUND_S, "the computation ended")
    process = lab.workers.pop(worker)
    process.send_signal(signal.SIGTERM)
    # It gives the unstored result up and exits; the input stays in Redis for a retry.
    process.wait(timeout=BOUND_S)
    lab.redis.start()

    lab.start_worker()
    ended = lab.wait_for(job_id, {"succeeded", "failed"})
    assert ended["status"] == "succeeded", ended
    assert lab.job(job_id).meta.get("lost_attempts") == 1  # the claim lapsed, the job ran again
