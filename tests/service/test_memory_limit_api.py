"""A shared lab server that loses nothing: the request that once grew a worker to 6.3 GB (the
1-Wasserstein distance of two random diagrams of 20,000 pairs) fails with a memory-limit
problem under a 1 GiB job memory limit, and the next job on that same worker succeeds.

The up-front refusal by the estimate is turned off here (refuse_costly_jobs=False), so the
job reaches the worker and the runtime cap is what stops it; tests/service/test_estimates_api.py
checks that the API refuses the same request before queueing. The test process caps its own
address space (6 GiB above its size), and the worker it starts inherits that cap.
"""

from collections.abc import Iterator

import gudhi.wasserstein
import numpy as np
import pytest
from flask.testing import FlaskClient

from service.app import create_app
from service.settings import Settings
from tests.support.api import fresh_queue, post, result_of, status_once
from tests.support.processes import children_of
from tests.support.worker_process import start_worker, stop_worker
from workers.memory import MIB, address_space_cap

pytestmark = pytest.mark.slow

LIMIT_MB = 1024


def random_diagram(n: int, seed: int) -> np.ndarray:
    """n pairs: births uniform on [0, 1), lifetimes uniform on [0, 1)."""
    rng = np.random.default_rng(seed)
    births = rng.uniform(size=n)
    return np.c_[births, births + rng.uniform(size=n)]


@pytest.fixture
def served(redis_url: str) -> Iterator[tuple[FlaskClient, int]]:
    """An app that queues costly jobs anyway, and one real worker, both under a cap."""
    with address_space_cap(6 * 1024 * MIB):
        settings = Settings(
            redis_url=redis_url,
            queue=fresh_queue(),
            job_memory_limit_mb=LIMIT_MB,
            refuse_costly_jobs=False,
            auth="open",
        )
        worker = start_worker(redis_url, settings.queue)
        try:
            app = create_app(settings)
            app.testing = True
            yield app.test_client(), worker.pid
            assert worker.poll() is None  # the worker lived through it all
        finally:
            stop_worker(worker)


def test_the_20000_pair_wasserstein_hits_the_limit_and_the_worker_carries_on(
    served: tuple[FlaskClient, int],
) -> None:
    client, worker_pid = served
    first_children = set(children_of(worker_pid))
    body = {
        "metric": "wasserstein",
        "diagrams": [random_diagram(20_000, 1).tolist(), random_diagram(20_000, 2).tolist()],
    }
    response = post(client, "/v1/distances", body, headers={"Prefer": "wait=0"})
    assert response.status_code == 202, response.get_data(as_text=True)
    status = status_once(client, response.get_json()["job_id"], {"failed", "succeeded"}, 300)
    assert status["status"] == "failed"
    problem = status["problem"]
    assert problem["type"] == "urn:lacuna:problem:memory-limit"
    assert problem["status"] == 422
    assert f"memory limit of {LIMIT_MB} MiB" in problem["detail"]
    assert problem["memory_limit_mb"] == LIMIT_MB

    # The next job on the same worker, in its compute child (3000 rows: not run inline).
    a, b = random_diagram(1500, 3), random_diagram(1500, 4)
    result = result_of(
        client, {"metric": "wasserstein", "diagrams": [a.tolist(), b.tolist()]}, "/v1/distances"
    )
    # Reference: gudhi's Wasserstein distance (POT's exact transport), L-infinity ground
    # metric as ours (internal_p=inf).
    expected = gudhi.wasserstein.wasserstein_distance(a, b, order=1.0, internal_p=np.inf)
    assert result["matrix"][0][1] == pytest.approx(expected, rel=1e-9)
    # A fresh compute child did it: the one that hit the limit was killed.
    now = set(children_of(worker_pid))
    assert now and not now & first_children
