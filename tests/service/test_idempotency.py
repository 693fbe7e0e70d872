"""Idempotency-Key on POST /v1/jobs and /v1/distances: a retried submission answers the first
one's job.

The behaviour checked is the one the IETF httpapi draft "The Idempotency-Key HTTP Header
Field" describes (from memory): the same key with the same request is the same operation, the
same key with a different request is refused (422), and a key has a lifetime.
"""

import io
import json
import threading
import uuid
from typing import Any

import numpy as np
import pytest
from flask.testing import FlaskClient

from service.queue import IDEMPOTENCY_PREFIX
from tests.support.api import JOBS, WAIT, post, problem_of, stored_jobs
from tests.support.bodies import rips_job
from workers.spec.arrays import to_npy_bytes
from workers.spec.problems import PROBLEM_TYPE


def submit(client: FlaskClient, key: str, payload: dict[str, Any] | None = None) -> str:
    answer = post(client, JOBS, payload or rips_job(), headers={"Idempotency-Key": key})
    assert answer.status_code == 202, answer.get_data(as_text=True)
    job_id: str = answer.get_json()["job_id"]
    assert answer.headers["Location"] == f"/v1/jobs/{job_id}"
    return job_id


def test_the_same_key_and_body_answer_the_same_job(client: FlaskClient) -> None:
    key = str(uuid.uuid4())
    first = submit(client, key)
    assert submit(client, key) == first
    assert submit(client, f'"{key}"') == first  # the quoted string form is the same key
    assert stored_jobs(client) == 1


def test_without_a_key_every_submission_is_a_new_job(client: FlaskClient) -> None:
    ids = {post(client, JOBS, rips_job()).get_json()["job_id"] for _ in range(3)}
    assert len(ids) == 3 and stored_jobs(client) == 3


def test_the_same_key_with_another_body_is_422(client: FlaskClient) -> None:
    key = str(uuid.uuid4())
    first = submit(client, key)
    other = rips_job([[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]])
    problem = problem_of(post(client, JOBS, other, headers={"Idempotency-Key": key}), 422)
    assert problem["type"] == PROBLEM_TYPE + "idempotency-key-reused"
    assert "Idempotency-Key" in problem["detail"] and first in problem["detail"]
    assert stored_jobs(client) == 1


def test_keys_are_distinct(client: FlaskClient) -> None:
    assert submit(client, "key-a") != submit(client, "key-b")
    assert stored_jobs(client) == 2


def test_equal_requests_spelled_differently_are_the_same_request(client: FlaskClient) -> None:
    # The request hash is of the validated request, so key order and spacing do not count.
    key = str(uuid.uuid4())
    first = submit(client, key)
    spelled = json.dumps({"filtration": {"type": "rips"}, **rips_job()}, indent=3)
    answer = client.post(
        JOBS, data=spelled, content_type="application/json", headers={"Idempotency-Key": key}
    )
    assert answer.get_json()["job_id"] == first


def test_a_retried_upload_is_the_same_job(client: FlaskClient) -> None:
    # Each multipart retry has its own boundary; the key still names one job.
    pixels = np.random.default_rng(0).uniform(size=(16, 16))
    request = json.dumps({"input": {"type": "image"}, "filtration": {"type": "cubical"}})
    ids = set()
    for _ in range(2):
        answer = client.post(
            JOBS,
            data={"request": request, "data": (io.BytesIO(to_npy_bytes(pixels)), "a.npy")},
            content_type="multipart/form-data",
            headers={"Idempotency-Key": "upload-1"},
        )
        assert answer.status_code == 202, answer.get_data(as_text=True)
        ids.add(answer.get_json()["job_id"])
    assert len(ids) == 1 and stored_jobs(client) == 1


def test_concurrent_submissions_under_one_key_make_one_job(client: FlaskClient) -> None:
    key = str(uuid.uuid4())
    ids: list[str] = []
    barrier = threading.Barrier(8)

    def one() -> None:
        barrier.wait()
        ids.append(submit(client.application.test_client(), key))

    threads = [threading.Thread(target=one) for _ in range(8)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert len(ids) == 8 and len(set(ids)) == 1
    assert stored_jobs(client) == 1


def test_a_key_whose_job_expired_starts_over(client: FlaskClient) -> None:
    key = str(uuid.uuid4())
    first = submit(client, key)
    queue = client.application.extensions["lacuna"].queue
    queue.find(first, "public").delete()  # as if its result had expired
    record = f"{IDEMPOTENCY_PREFIX}public:{key}"
    queue.redis.expire(record, queue.settings.idempotency_ttl_s - 60)  # claimed a minute ago
    second = submit(client, key)
    assert second != first and stored_jobs(client) == 1
    assert submit(client, key) == second


def test_a_refused_request_does_not_use_up_the_key(client: FlaskClient) -> None:
    key = str(uuid.uuid4())
    bad = post(client, JOBS, rips_job([[0.0, "x"]]), headers={"Idempotency-Key": key})
    problem_of(bad, 422)
    assert submit(client, key)  # the key is still free for a valid request


@pytest.mark.parametrize("key", ["", "a b", "x" * 256, '"unbalanced', "tab\there", "é"])
def test_an_unusable_key_is_400(client: FlaskClient, key: str) -> None:
    answer = post(client, JOBS, rips_job(), headers={"Idempotency-Key": key})
    problem = problem_of(answer, 400)
    assert problem["type"] == PROBLEM_TYPE + "idempotency-key-invalid"
    assert "Idempotency-Key" in problem["detail"]
    assert stored_jobs(client) == 0


def test_distances_take_the_key_too(client: FlaskClient) -> None:
    # Without a worker the small matrix is waited for in vain (Prefer: wait=0 answers at once).
    body = {"diagrams": [[[0.0, 1.0]], [[0.0, 2.0]]], "metric": "bottleneck"}
    key = str(uuid.uuid4())
    headers = {"Idempotency-Key": key, "Prefer": "wait=0"}
    first = post(client, "/v1/distances", body, headers=headers)
    again = post(client, "/v1/distances", body, headers=headers)
    assert first.status_code == again.status_code == 202
    assert first.get_json()["job_id"] == again.get_json()["job_id"]
    assert stored_jobs(client) == 1
    other = dict(body, metric="wasserstein")
    problem = problem_of(post(client, "/v1/distances", other, headers=headers), 422)
    assert problem["type"] == PROBLEM_TYPE + "idempotency-key-reused"


def test_a_key_retried_after_its_job_succeeded_answers_the_result(
    served_client: FlaskClient,
) -> None:
    # A retry (a lost answer, say) gets what an answer in time would have been: the result.
    key = str(uuid.uuid4())
    body = rips_job([[0.0, 0.0], [3.0, 4.0]])
    first = post(served_client, JOBS, body, headers={"Idempotency-Key": key, **WAIT})
    assert first.status_code == 200, first.get_data(as_text=True)
    again = post(served_client, JOBS, body, headers={"Idempotency-Key": key})
    assert again.status_code == 200
    assert again.get_json() == first.get_json()
    # 3-4-5 right triangle (Pythagoras): the two points merge at distance 5.
    assert again.get_json()["diagrams"][0]["pairs"] == [[0.0, 5.0], [0.0, None]]
