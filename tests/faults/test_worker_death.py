"""Workers SIGKILLed while they run a job, and workers restarted under the same name.

What a killed worker's job must become (requeued once, then failed worker-lost) is our own
rule (workers/reaper.py); the bounds below are generous: they only catch a job left running.
"""

import pytest

from tests.support.api import JOBS, call
from tests.support.bodies import rips_job
from tests.support.faults import BOUND_S, FaultLab, ready_workers, slow_rips_job
from tests.support.waiting import wait_until
from tests.support.worker_process import start_worker
from workers.spec.metrics import cancelled_key, failures_key

pytestmark = pytest.mark.slow

WORKER_LOST = "worker-lost"


def test_a_job_whose_worker_is_killed_runs_again_elsewhere_and_succeeds(lab: FaultLab) -> None:
    lab.start_worker()
    lab.start_worker()
    job_id = lab.submit(slow_rips_job())
    victim = lab.runner_of(job_id)
    lab.kill(victim)

    ended = lab.wait_for(job_id, {"succeeded", "failed"})
    assert ended["status"] == "succeeded", ended
    job = lab.job(job_id)
    assert job.meta["lost_attempts"] == 1
    survivor = next(iter(lab.workers))
    assert job.worker_name == survivor != victim


def test_a_job_whose_every_attempt_is_killed_fails_worker_lost(lab: FaultLab) -> None:
    for _ in range(3):
        lab.start_worker()
    job_id = lab.submit(slow_rips_job())
    for _attempt in (1, 2):  # the first run and its one retry, each on a worker killed
        lab.kill(lab.runner_of(job_id))

    ended = lab.wait_for(job_id, {"succeeded", "failed"}, timeout=BOUND_S)
    assert ended["status"] == "failed", ended
    problem = ended["problem"]
    assert problem["type"].endswith(WORKER_LOST)
    assert "each of its 2 attempts" in problem["detail"]
    assert lab.job(job_id).meta["lost_attempts"] == 2
    # Counted for /metrics like any failure, though no worker's failure callback ran.
    assert lab.connection().hget(failures_key(lab.queue), WORKER_LOST) == b"1"


def test_readyz_counts_only_live_workers(lab: FaultLab) -> None:
    first = lab.start_worker()
    lab.start_worker()
    wait_until(lambda: ready_workers(lab) == 2, BOUND_S, "two live workers")
    lab.kill(first)
    # The dead one stays in RQ's registry until its registration lapses; /readyz must not
    # count it from then on.
    wait_until(lambda: ready_workers(lab) == 1, BOUND_S, "/readyz counting one live worker")
    lab.kill(next(iter(lab.workers)))
    wait_until(lambda: ready_workers(lab) == 0, BOUND_S, "/readyz answering 503")


def test_a_worker_restarted_under_its_name_starts_takes_its_job_back_and_goes_on(
    lab: FaultLab,
) -> None:
    name = lab.start_worker("worker-1")
    job_id = lab.submit(slow_rips_job(seed=1))
    assert lab.runner_of(job_id) == name
    lab.kill(name)

    lab.start_worker(name)  # before: "There exists an active worker named 'worker-1'"
    ended = lab.wait_for(job_id, {"succeeded", "failed"})
    assert ended["status"] == "succeeded", ended
    assert lab.job(job_id).meta["lost_attempts"] == 1  # the predecessor's attempt

    after = lab.submit(rips_job())
    assert lab.wait_for(after, {"succeeded", "failed"})["status"] == "succeeded"
    assert lab.job(after).worker_name == name


def test_a_second_live_worker_cannot_take_a_name(lab: FaultLab) -> None:
    name = lab.start_worker("worker-1")
    with pytest.raises(RuntimeError, match="exited with 2"):
        start_worker(lab.redis.url, lab.queue, name=name)
    assert lab.alive(name)
    job_id = lab.submit(rips_job())
    assert lab.wait_for(job_id, {"succeeded", "failed"})["status"] == "succeeded"


def test_a_job_cancelled_after_its_worker_died_ends_cancelled_not_run_again(
    lab: FaultLab,
) -> None:
    lab.start_worker()
    lab.start_worker()
    job_id = lab.submit(slow_rips_job())
    victim = lab.runner_of(job_id)
    lab.kill(victim)
    # The job still reads running (on the dead worker) until it is reaped: the cancel sets
    # the flag a running job polls, which nobody polls now; the reaper reads it instead.
    answer = call(lab.client, "DELETE", f"{JOBS}/{job_id}")
    assert answer.status_code in (200, 202), answer.get_data(as_text=True)

    ended = lab.wait_for(job_id, {"succeeded", "failed", "cancelled"})
    assert ended["status"] == "cancelled", ended
    assert lab.job(job_id).worker_name == victim  # never taken by the survivor
    assert lab.connection().zscore(cancelled_key(lab.queue), job_id) is not None  # counted
