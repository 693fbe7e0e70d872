"""Tenants over HTTP: API keys (RFC 6750 Bearer), what one tenant cannot see of another's,
the request rate (RFC 6585 429 with Retry-After) and the quotas, on the real app and the
suite's own Redis.

Each isolation check is paired with the owner's own request succeeding, so a check that
could not fail (an id that is a 404 for everyone) would show.
"""

import subprocess
import threading
import uuid
from typing import Any

import pytest
from flask.testing import FlaskClient
from pydantic import ValidationError
from redis import Redis
from werkzeug.test import TestResponse

from service.app import create_app
from service.keys import KeyStore, tenant_record_name
from service.quotas import set_overrides, unfinished_key
from service.settings import Settings
from tests.support.api import (
    JOBS,
    WAIT,
    app_with,
    call,
    fresh_queue,
    post,
    problem_of,
    stored_jobs,
)
from tests.support.bodies import rips_job
from tests.support.waiting import wait_until
from workers.spec.problems import PROBLEM_TYPE

SPECS = "/v1/feature-specs"
BETTI: dict[str, Any] = {"type": "betti_curve", "dim": 0, "t_range": [0.0, 2.0], "samples": 5}


@pytest.fixture
def settings(redis_url: str) -> Settings:
    """Keys mode (what a shared server runs), on the test database and queue."""
    return Settings(redis_url=redis_url, queue=fresh_queue(), auth="keys")


def bearer(key: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {key}"}  # RFC 6750 section 2.1


@pytest.fixture
def keys(redis_url: str) -> dict[str, str]:
    """One key each for tenants A and B (made by the store the keys command uses)."""
    store = KeyStore(Redis.from_url(redis_url))
    return {tenant: store.create(tenant).key for tenant in ("lab-a", "lab-b")}


def submitted(client: FlaskClient, key: str, body: dict[str, Any], **headers: str) -> str:
    answer = post(client, JOBS, body, headers={**bearer(key), **headers})
    assert answer.status_code in (200, 202), answer.get_data(as_text=True)
    job_id: str = answer.get_json()["job_id"]
    return job_id


def unauthorized(response: TestResponse) -> tuple[dict[str, Any], str]:
    """The 401 problem and its challenge. RFC 9110 11.6.1: a 401 carries WWW-Authenticate;
    RFC 6750 section 3: its scheme is Bearer."""
    problem = problem_of(response, 401)
    assert problem["type"] == PROBLEM_TYPE + "unauthorized"
    challenge = response.headers["WWW-Authenticate"]
    assert challenge.startswith("Bearer "), challenge
    return problem, challenge


def test_a_request_without_a_key_is_401_with_a_bearer_challenge(client: FlaskClient) -> None:
    for method, path in (("GET", "/v1/capabilities"), ("GET", f"{JOBS}/{uuid.uuid4()}")):
        _, challenge = unauthorized(call(client, method, path))
        # RFC 6750 section 3.1: no error code when the request carried no credentials
        assert "error=" not in challenge
    _, challenge = unauthorized(post(client, JOBS, rips_job()))
    # another scheme is not Bearer credentials (RFC 6750 section 2.1)
    unauthorized(call(client, "GET", "/v1/capabilities", headers={"Authorization": "Basic eDp5"}))


def test_a_request_without_a_key_is_refused_before_its_body_is_read(
    redis_url: str, keys: dict[str, str]
) -> None:
    client = app_with(
        redis_url=redis_url, queue=fresh_queue(), auth="keys", max_body_bytes=1024
    ).test_client()
    too_big = rips_job(points=[[float(i), 0.0] for i in range(500)])  # about 6 kB
    unauthorized(post(client, JOBS, too_big))  # not a 413: nothing was read
    problem_of(post(client, JOBS, too_big, headers=bearer(keys["lab-a"])), 413)  # with a key


def test_an_unknown_or_revoked_key_is_401_invalid_token(
    client: FlaskClient, keys: dict[str, str], redis_url: str
) -> None:
    store = KeyStore(Redis.from_url(redis_url))
    fresh = store.create("lab-c")
    assert call(client, "GET", "/v1/capabilities", headers=bearer(fresh.key)).status_code == 200
    # RFC 6750 section 3.1: a token that is "revoked ... or invalid" is invalid_token
    for key in (fresh.key[:-1] + ("A" if fresh.key[-1] != "A" else "B"), "not-a-key"):
        _, challenge = unauthorized(call(client, "GET", "/v1/capabilities", headers=bearer(key)))
        assert 'error="invalid_token"' in challenge
    assert store.revoke(fresh.record.key_id) is not None
    problem, challenge = unauthorized(
        call(client, "GET", "/v1/capabilities", headers=bearer(fresh.key))
    )
    assert 'error="invalid_token"' in challenge and "revoked" in problem["detail"]
    assert call(client, "GET", "/v1/capabilities", headers=bearer(keys["lab-a"])).status_code == 200


def test_health_and_the_openapi_document_need_no_key(client: FlaskClient) -> None:
    assert call(client, "GET", "/healthz").status_code == 200
    assert call(client, "GET", "/v1/openapi.json").status_code == 200
    assert call(client, "GET", "/readyz").status_code == 503  # no worker here, but no 401


def test_another_tenants_job_is_not_found(
    client: FlaskClient, keys: dict[str, str], worker: subprocess.Popen[bytes]
) -> None:
    a, b = bearer(keys["lab-a"]), bearer(keys["lab-b"])
    job_id = submitted(client, keys["lab-a"], rips_job(max_dim=1), **WAIT)
    for method, path in (
        ("GET", f"{JOBS}/{job_id}"),
        ("GET", f"{JOBS}/{job_id}/result"),
        ("GET", f"{JOBS}/{job_id}/plot"),
    ):
        assert call(client, method, path, headers=a).status_code == 200, path
        problem = problem_of(call(client, method, path, headers=b), 404)
        assert problem["type"] == PROBLEM_TYPE + "job-not-found", path
    distances = {"metric": "bottleneck", "dim": 1, "job_ids": [job_id, job_id]}
    assert post(client, "/v1/distances", distances, headers=a).status_code == 200
    refused = problem_of(post(client, "/v1/distances", distances, headers=b), 422)
    # B is told exactly what it is told of an id that does not exist
    assert [e["pointer"] for e in refused["errors"]] == ["/job_ids/0", "/job_ids/1"]
    assert "no job" in refused["errors"][0]["message"]
    assert call(client, "DELETE", f"{JOBS}/{job_id}", headers=b).status_code == 404
    assert call(client, "DELETE", f"{JOBS}/{job_id}", headers=a).status_code == 409  # it ended


def test_a_queued_job_of_another_tenant_cannot_be_cancelled(
    client: FlaskClient, keys: dict[str, str]
) -> None:
    job_id = submitted(client, keys["lab-a"], rips_job())  # no worker: it stays queued
    problem_of(call(client, "DELETE", f"{JOBS}/{job_id}", headers=bearer(keys["lab-b"])), 404)
    answer = call(client, "DELETE", f"{JOBS}/{job_id}", headers=bearer(keys["lab-a"]))
    assert answer.status_code == 200 and answer.get_json()["status"] == "cancelled"


def test_one_idempotency_key_under_two_tenants_makes_two_jobs(
    client: FlaskClient, keys: dict[str, str]
) -> None:
    key = {"Idempotency-Key": str(uuid.uuid4())}
    first_a = submitted(client, keys["lab-a"], rips_job(), **key)
    first_b = submitted(client, keys["lab-b"], rips_job(), **key)
    assert first_a != first_b
    assert submitted(client, keys["lab-a"], rips_job(), **key) == first_a
    assert submitted(client, keys["lab-b"], rips_job(), **key) == first_b
    # Another body under A's key: for A a 422 naming A's job; for C, a fresh job that never
    # hears of A's.
    other = rips_job(max_dim=0)
    reused = problem_of(post(client, JOBS, other, headers={**bearer(keys["lab-a"]), **key}), 422)
    assert first_a in reused["detail"]
    store = KeyStore(client.application.extensions["lacuna"].queue.redis)
    third = submitted(client, store.create("lab-c").key, other, **key)
    assert third not in (first_a, first_b)


def test_feature_specs_are_scoped_by_tenant(client: FlaskClient, keys: dict[str, str]) -> None:
    a, b = bearer(keys["lab-a"]), bearer(keys["lab-b"])
    answer = post(client, SPECS, BETTI, headers=a)
    assert answer.status_code == 200, answer.get_data(as_text=True)
    spec_id = answer.get_json()["spec_id"]
    assert call(client, "GET", f"{SPECS}/{spec_id}", headers=a).status_code == 200
    problem = problem_of(call(client, "GET", f"{SPECS}/{spec_id}", headers=b), 404)
    assert problem["type"] == PROBLEM_TYPE + "feature-spec-not-found"
    by_id = rips_job(features=[{"spec_id": spec_id}])
    assert post(client, JOBS, by_id, headers=a).status_code == 202
    refused = problem_of(post(client, JOBS, by_id, headers=b), 422)
    assert [e["pointer"] for e in refused["errors"]] == ["/features/0/spec_id"]


def test_the_request_rate_is_429_with_retry_after(redis_url: str, keys: dict[str, str]) -> None:
    # A bucket of 3 that refills one token per 100 s: the 4th request within the test is over.
    client = app_with(
        redis_url=redis_url, queue=fresh_queue(), auth="keys", requests_per_s=0.01, request_burst=3
    ).test_client()
    a, b = bearer(keys["lab-a"]), bearer(keys["lab-b"])
    for _ in range(3):
        assert call(client, "GET", "/v1/capabilities", headers=a).status_code == 200
    answer = call(client, "GET", "/v1/capabilities", headers=a)
    problem = problem_of(answer, 429)  # RFC 6585 section 4
    assert problem["type"] == PROBLEM_TYPE + "rate-limited" and "lab-a" in problem["detail"]
    # RFC 6585 section 4 / RFC 9110 10.2.3: Retry-After in delay-seconds, here up to 100 s
    assert 1 <= int(answer.headers["Retry-After"]) <= 100
    assert call(client, "GET", "/v1/capabilities", headers=b).status_code == 200  # own bucket
    assert call(client, "GET", "/healthz").status_code == 200  # uses no rate


def test_the_unfinished_jobs_quota_is_429_naming_it(
    client: FlaskClient, keys: dict[str, str], redis_url: str
) -> None:
    set_overrides(Redis.from_url(redis_url), "lab-a", {"max_unfinished_jobs": 2})
    a = bearer(keys["lab-a"])
    jobs = [submitted(client, keys["lab-a"], rips_job()) for _ in range(2)]  # no worker
    answer = post(client, JOBS, rips_job(), headers=a)
    problem = problem_of(answer, 429)
    assert problem["type"] == PROBLEM_TYPE + "quota-exceeded"
    assert problem["quota"] == "max_unfinished_jobs" and problem["limit"] == 2
    assert int(answer.headers["Retry-After"]) >= 1
    submitted(client, keys["lab-b"], rips_job())  # B's quota is its own
    caller = call(client, "GET", "/v1/capabilities", headers=a).get_json()["caller"]
    assert caller["tenant"] == "lab-a" and caller["access"] == "keys"
    assert caller["quotas"]["max_unfinished_jobs"] == 2
    assert caller["usage"]["unfinished_jobs"] == 2
    # A job that ends frees its place: the count is derived from the jobs, not kept
    assert call(client, "DELETE", f"{JOBS}/{jobs[0]}", headers=a).status_code == 200
    jobs[0] = submitted(client, keys["lab-a"], rips_job())
    # A job that vanished (expired with its queue TTL) frees its place too
    redis = Redis.from_url(redis_url)
    redis.delete(f"rq:job:{jobs[1]}")
    redis.zadd(unfinished_key("lab-a"), {jobs[1]: 0})  # reserved long ago
    submitted(client, keys["lab-a"], rips_job())


def test_the_feature_spec_quota_is_429_naming_it(redis_url: str, keys: dict[str, str]) -> None:
    client = app_with(
        redis_url=redis_url, queue=fresh_queue(), auth="keys", max_feature_specs=2
    ).test_client()
    a = bearer(keys["lab-a"])
    for samples in (5, 6):
        assert post(client, SPECS, {**BETTI, "samples": samples}, headers=a).status_code == 200
    answer = post(client, SPECS, {**BETTI, "samples": 7}, headers=a)
    problem = problem_of(answer, 429)
    assert problem["quota"] == "max_feature_specs" and problem["limit"] == 2
    assert post(client, SPECS, BETTI, headers=a).status_code == 200  # registered already
    caller = call(client, "GET", "/v1/capabilities", headers=a).get_json()["caller"]
    assert caller["usage"]["feature_specs"] == 2
    assert (
        post(client, SPECS, {**BETTI, "samples": 7}, headers=bearer(keys["lab-b"])).status_code
        == 200
    )


def test_a_feature_spec_expires_unless_used(redis_url: str, keys: dict[str, str]) -> None:
    a = bearer(keys["lab-a"])
    client = app_with(
        redis_url=redis_url, queue=fresh_queue(), auth="keys", feature_spec_ttl_s=1
    ).test_client()
    spec_id = post(client, SPECS, BETTI, headers=a).get_json()["spec_id"]

    def usage() -> int:  # what capabilities counts; reading the spec would refresh it
        caller = call(client, "GET", "/v1/capabilities", headers=a).get_json()["caller"]
        count: int = caller["usage"]["feature_specs"]
        return count

    assert usage() == 1
    wait_until(lambda: usage() == 0, 10, "the spec expired after its 1 s")
    problem_of(call(client, "GET", f"{SPECS}/{spec_id}", headers=a), 404)
    refused = problem_of(
        post(client, JOBS, rips_job(features=[{"spec_id": spec_id}]), headers=a), 422
    )
    assert [e["pointer"] for e in refused["errors"]] == ["/features/0/spec_id"]

    # Use refreshes the expiry: a spec about to expire is good for the whole TTL again.
    client = app_with(
        redis_url=redis_url, queue=fresh_queue(), auth="keys", feature_spec_ttl_s=1000
    ).test_client()
    spec_id = post(client, SPECS, BETTI, headers=a).get_json()["spec_id"]
    redis = Redis.from_url(redis_url)
    (stored,) = redis.keys(f"lacuna:feature-spec:lab-a:{spec_id}")
    redis.expire(stored, 5)
    assert (
        post(client, JOBS, rips_job(features=[{"spec_id": spec_id}]), headers=a).status_code == 202
    )
    assert redis.ttl(stored) > 900


def test_open_mode_acts_for_public_and_needs_no_key(redis_url: str) -> None:
    client = app_with(redis_url=redis_url, queue=fresh_queue(), auth="open").test_client()
    job_id = post(client, JOBS, rips_job()).get_json()["job_id"]
    assert call(client, "GET", f"{JOBS}/{job_id}").status_code == 200
    caller = call(client, "GET", "/v1/capabilities").get_json()["caller"]
    assert caller["tenant"] == "public" and caller["access"] == "open"
    assert caller["usage"] == {"unfinished_jobs": 1, "feature_specs": 0}
    assert caller["quotas"]["max_unfinished_jobs"] == Settings().max_unfinished_jobs


def test_the_bare_app_needs_keys_whatever_its_host(redis_url: str) -> None:
    # gunicorn service.wsgi:app -b 0.0.0.0 leaves LACUNA_HOST at its loopback default: the
    # app cannot see its bind, so unset auth is keys everywhere (lacuna serve sets auth).
    for host in ("127.0.0.1", "::1", "0.0.0.0", "10.1.2.3"):
        app = create_app(Settings(redis_url=redis_url, queue=fresh_queue(), host=host))
        assert call(app.test_client(), "GET", "/v1/capabilities").status_code == 401, host


def test_concurrent_submissions_never_exceed_the_unfinished_jobs_quota(
    client: FlaskClient, keys: dict[str, str], redis_url: str
) -> None:
    set_overrides(Redis.from_url(redis_url), "lab-a", {"max_unfinished_jobs": 3})
    statuses: list[int] = []
    barrier = threading.Barrier(8)

    def one() -> None:
        barrier.wait()
        answer = post(
            client.application.test_client(), JOBS, rips_job(), headers=bearer(keys["lab-a"])
        )
        statuses.append(answer.status_code)

    threads = [threading.Thread(target=one) for _ in range(8)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert sorted(statuses) == [202] * 3 + [429] * 5
    assert stored_jobs(client) == 3


def test_a_rate_too_small_to_refill_is_refused_and_a_stored_one_is_survived(
    client: FlaskClient, keys: dict[str, str], redis_url: str
) -> None:
    # Redis EXPIRE takes at most about 9.2e15 s (LLONG_MAX milliseconds; redis.io EXPIRE,
    # from memory): burst / 1e-13 is beyond it.
    with pytest.raises(ValidationError):
        Settings(requests_per_s=1e-13)
    with pytest.raises(ValueError, match="requests_per_s"):
        set_overrides(Redis.from_url(redis_url), "lab-a", {"requests_per_s": 1e-13})
    # One stored by hand (or before the bound) still answers, never a 500.
    Redis.from_url(redis_url).hset(tenant_record_name("lab-a"), "requests_per_s", "1e-13")
    answer = call(client, "GET", "/v1/capabilities", headers=bearer(keys["lab-a"]))
    assert answer.status_code == 200, answer.get_data(as_text=True)
