"""The client's API key (``api_key=`` or LACUNA_API_KEY, sent as ``Authorization: Bearer``,
RFC 6750 section 2.1) and its handling of 401 and 429 answers, against the real app in keys
mode served over HTTP on 127.0.0.1 with the suite's own Redis."""

import uuid
from collections.abc import Callable

import pytest
from flask import Flask
from redis import Redis

from lacuna_client import Client, LacunaError
from service.keys import KeyStore
from tests.support.api import app_with, fresh_queue


def keys_app(redis_url: str, **settings: float) -> Flask:
    return app_with(redis_url=redis_url, queue=fresh_queue(), auth="keys", **settings)


def test_the_key_comes_from_the_argument_or_the_environment(
    redis_url: str, serve_over_http: Callable[[Flask], str], monkeypatch: pytest.MonkeyPatch
) -> None:
    key = KeyStore(Redis.from_url(redis_url)).create("lab-a").key
    base = serve_over_http(keys_app(redis_url))
    assert Client(base, api_key=key).capabilities()["caller"]["tenant"] == "lab-a"
    monkeypatch.setenv("LACUNA_API_KEY", key)
    assert Client(base).capabilities()["caller"]["tenant"] == "lab-a"
    with pytest.raises(LacunaError) as unknown_job:  # a job of nobody: 404, not 401
        Client(base).status(str(uuid.uuid4()))
    assert unknown_job.value.status == 404

    monkeypatch.delenv("LACUNA_API_KEY")
    with pytest.raises(LacunaError) as refused:  # 401 is never retried
        Client(base, retries=5, backoff=60).capabilities()
    assert refused.value.status == 401 and refused.value.type.endswith("unauthorized")


def test_a_429_is_retried_after_retry_after_unless_that_is_long(
    redis_url: str, serve_over_http: Callable[[Flask], str]
) -> None:
    store = KeyStore(Redis.from_url(redis_url))
    key = store.create("lab-a").key
    # One token, back after 1 s (RFC 6585 section 4: 429 with Retry-After: 1).
    quick = Client(serve_over_http(keys_app(redis_url, requests_per_s=1.0, request_burst=1)), key)
    quick.capabilities()
    assert quick.capabilities()["caller"]["tenant"] == "lab-a"  # after one 429 and a wait
    # A token back only after 1000 s: raised at once, however many retries are allowed.
    # (Another tenant: lab-a's bucket is empty now, and buckets live in Redis, not the app.)
    slow = Client(
        serve_over_http(keys_app(redis_url, requests_per_s=0.001, request_burst=1)),
        store.create("lab-b").key,
    )
    slow.capabilities()
    with pytest.raises(LacunaError) as limited:
        slow.capabilities()
    assert limited.value.status == 429 and limited.value.type.endswith("rate-limited")
