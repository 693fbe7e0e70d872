"""A worker whose job was reaped while it still computes (cut off from Redis too long, as the
reaper sees it) must not write over the job's next attempt, and stops computing.

The reaping is done by hand with the reaper's own function on the job's claim, so no worker is
dead: the one computing is the zombie. What must hold is our own rule (workers/claim.py,
workers/reaper.py): the attempt count the reaper stored survives, and the job succeeds once.
"""

import numpy as np
import pytest
from rq import Queue
from rq.serializers import JSONSerializer

from tests.support.api import post
from tests.support.faults import BOUND_S, FaultLab
from tests.support.waiting import wait_until
from workers.reaper import reap_claim

pytestmark = pytest.mark.slow

DISTANCES = "/v1/distances"


def _long_distance_job() -> dict[str, object]:
    """A Wasserstein matrix of 30 random diagrams of 400 pairs (435 pairs of diagrams, several
    seconds on two cores here: 276 pairs took 6.7 s on one, measured), which reports its
    progress as it goes."""
    rng = np.random.default_rng(5)
    diagrams = []
    for _ in range(30):
        births = rng.uniform(size=400)
        diagrams.append(np.column_stack((births, births + rng.uniform(size=400))).tolist())
    return {"metric": "wasserstein", "diagrams": diagrams}


def test_a_reaped_jobs_old_worker_does_not_write_over_its_next_attempt(lab: FaultLab) -> None:
    worker = lab.start_worker()
    response = post(lab.client, DISTANCES, _long_distance_job(), headers={"Prefer": "wait=0"})
    assert response.status_code == 202, response.get_data(as_text=True)[:500]
    job_id: str = response.get_json()["job_id"]
    wait_until(lambda: "progress" in lab.job(job_id).meta, BOUND_S, "the job showing its progress")
    connection = lab.connection()
    queue = Queue(lab.queue, connection=connection, serializer=JSONSerializer)
    members = connection.zrange(queue.started_job_registry.key, 0, -1)
    claims = [
        m.decode()
        for m in members
        if isinstance(m, bytes) and m.startswith(b"%s:" % job_id.encode())
    ]
    assert len(claims) == 1
    reaped = reap_claim(queue, claims[0], retries=1, why="reaped by the test")
    assert reaped is not None and reaped.outcome == "requeued"
    assert lab.job(job_id).meta.get("lost_attempts") == 1

    # The old attempt stops (its claim is gone) and the worker runs the job again.
    ended = lab.wait_for(job_id, {"succeeded", "failed"})
    assert ended["status"] == "succeeded", ended
    job = lab.job(job_id)
    assert job.meta.get("lost_attempts") == 1
    assert job.worker_name == worker
    assert len(job.results()) == 1  # the reaped attempt stored nothing: one result, one run
