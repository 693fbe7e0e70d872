"""Jobs stranded in RQ's intermediate queue: taken off the queue by a worker that died before
claiming them.

RQ's dequeue moves a job id from ``rq:queue:<name>`` to ``rq:queue:<name>:intermediate`` with
BLMOVE (rq/queue.py, ``Queue.dequeue_any``), and the worker then claims the job in the
StartedJobRegistry. A worker SIGKILLed between the two leaves the id where no worker looks;
the tests make that state by hand with LMOVE, the same move without the wait, so no worker
holds the job. What such a job must become (queued again as one more lost attempt, then run)
is our own rule (workers/reaper.py); the bounds are generous: they only catch a stuck job.
"""

from typing import Any

import numpy as np
import pytest
from redis import Redis
from rq import Queue
from rq.serializers import JSONSerializer
from rq.utils import as_text

from tests.support.bodies import rips_job
from tests.support.faults import BOUND_S, FaultLab
from tests.support.waiting import wait_until

pytestmark = pytest.mark.slow


def _strand(connection: Redis, queue: Queue) -> str:
    """Move the head of ``queue`` to its intermediate queue as BLMOVE does (LEFT to RIGHT,
    redis-py's defaults for both); returns the id moved."""
    moved = connection.lmove(queue.key, queue.intermediate_queue_key)
    assert moved is not None, "the queue was empty"
    return as_text(moved)


def _intermediate(connection: Redis, queue: Queue) -> list[str]:
    return [as_text(i) for i in connection.lrange(queue.intermediate_queue_key, 0, -1)]


def _held_job() -> dict[str, Any]:
    """A Rips job that outlasts the grace of a stranded one (DEAD_AFTER_S + a pass) several
    times over: 1600 uniform points in the unit cube up to H2, about 11 s here
    (measured; 1400 points took 7.6 s, the stranded job was queued again 3.5 s after it was
    stranded)."""
    points = np.random.default_rng(2).uniform(size=(1600, 3))
    return rips_job(points.tolist(), max_dim=2)


def _queue(lab: FaultLab, connection: Redis) -> Queue:
    return Queue(lab.queue, connection=connection, serializer=JSONSerializer)


def test_a_job_stranded_in_the_intermediate_queue_is_queued_again_and_succeeds(
    lab: FaultLab,
) -> None:
    connection = lab.connection()
    queue = _queue(lab, connection)
    job_id = lab.submit(rips_job())  # no worker yet: it waits on the queue
    assert _strand(connection, queue) == job_id
    assert connection.llen(queue.key) == 0

    lab.start_worker()
    ended = lab.wait_for(job_id, {"succeeded", "failed"}, timeout=BOUND_S)
    assert ended["status"] == "succeeded", ended
    assert lab.job(job_id).meta["lost_attempts"] == 1  # the dead taker's attempt
    assert _intermediate(connection, queue) == []


def test_a_stranded_job_past_its_retries_fails_worker_lost(lab: FaultLab) -> None:
    connection = lab.connection()
    queue = _queue(lab, connection)
    job_id = lab.submit(rips_job())
    # The lab allows one retry (LACUNA_LOST_JOB_RETRIES=1): a job already lost once has none
    # left when it is stranded.
    job = lab.job(job_id)
    job.meta["lost_attempts"] = 1
    job.save_meta()
    assert _strand(connection, queue) == job_id

    lab.start_worker()
    ended = lab.wait_for(job_id, {"succeeded", "failed"}, timeout=BOUND_S)
    assert ended["status"] == "failed", ended
    assert ended["problem"]["type"].endswith("worker-lost"), ended
    assert "each of its 2 attempts" in ended["problem"]["detail"]
    assert lab.job(job_id).meta["lost_attempts"] == 2
    assert _intermediate(connection, queue) == []


def test_a_job_a_live_worker_holds_is_left_alone_while_a_stranded_one_is_reaped(
    lab: FaultLab,
) -> None:
    connection = lab.connection()
    queue = _queue(lab, connection)
    lab.start_worker()
    held = lab.submit(_held_job())
    runner = lab.runner_of(held)
    # A worker listening on several queues leaves the id there while it runs the job (RQ's
    # Worker.perform_job removes it only for a single queue): put it back as such a one would.
    connection.rpush(queue.intermediate_queue_key, held)
    stranded = lab.submit(rips_job())  # waits: the only worker is busy
    assert _strand(connection, queue) == stranded

    def requeued() -> bool:
        return bool(lab.job(stranded).meta.get("lost_attempts") == 1)

    wait_until(requeued, BOUND_S, f"the stranded job {stranded} queued again")
    # Every pass that saw the stranded id unclaimed also saw the held one, with its claim.
    held_job = lab.job(held)
    assert "lost_attempts" not in held_job.meta  # never taken from its live worker
    assert held_job.get_status(refresh=False) == "started", "the held job ended too soon"
    assert held in _intermediate(connection, queue)

    assert lab.wait_for(held, {"succeeded", "failed"})["status"] == "succeeded"
    held_job = lab.job(held)
    assert held_job.worker_name == runner
    assert "lost_attempts" not in held_job.meta
    assert lab.wait_for(stranded, {"succeeded", "failed"})["status"] == "succeeded"
