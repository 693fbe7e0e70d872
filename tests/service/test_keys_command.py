"""``lacuna keys`` (``python -m service keys``) as a real process against the suite's Redis,
and the bind rule of ``lacuna serve``: open access (no keys) only on a loopback address
unless ``--open-access`` says otherwise.

Loopback addresses: 127.0.0.0/8 (RFC 1122 3.2.1.3) and ::1 (RFC 4291 2.5.3).
"""

import json
import os
import signal
import socket
import subprocess
import sys
from pathlib import Path
from typing import Any

import pytest
import requests
from redis import Redis

from service.commands import access_decision
from service.keys import KeyStore, digest_of
from tests.support.api import app_with, call, fresh_queue, problem_of
from tests.support.ports import free_port
from tests.support.stack import answers, stop
from tests.support.waiting import wait_until

LACUNA = str(Path(sys.executable).with_name("lacuna"))


def keys_command(redis_url: str, *arguments: str, lacuna: bool = False) -> Any:
    """Run ``keys <arguments> --redis <url> --json``; its exit status and parsed output."""
    program = [LACUNA] if lacuna else [sys.executable, "-m", "service"]
    done = subprocess.run(
        [*program, "keys", *arguments, "--redis", redis_url, "--json"],
        capture_output=True,
        text=True,
        timeout=60,
    )
    output = json.loads(done.stdout) if done.stdout.strip() else None
    return done.returncode, output, done.stderr


def test_keys_are_created_listed_and_revoked_by_the_command(redis_url: str) -> None:
    status, created, _ = keys_command(redis_url, "create", "--tenant", "lab-a", lacuna=True)
    assert status == 0, created
    key, key_id = created["key"], created["key_id"]
    assert key.startswith(key_id + ".") and created["tenant"] == "lab-a"
    # 32 random bytes of secrets.token_urlsafe are 43 base64url characters (RFC 4648 5)
    assert len(key.split(".", 1)[1]) == 43
    # Only the SHA-256 is kept: the key itself appears nowhere in Redis.
    redis = Redis.from_url(redis_url)
    stored = [redis.dump(name) or b"" for name in redis.keys("lacuna:*")]
    assert not any(key.encode() in value for value in stored)
    assert redis.exists(f"lacuna:api-key:{digest_of(key)}")

    app = app_with(redis_url=redis_url, queue=fresh_queue(), auth="keys").test_client()
    headers = {"Authorization": f"Bearer {key}"}
    answer = call(app, "GET", "/v1/capabilities", headers=headers)
    assert answer.status_code == 200 and answer.get_json()["caller"]["tenant"] == "lab-a"

    status, listed, _ = keys_command(redis_url, "list")
    assert status == 0
    assert [(k["key_id"], k["tenant"], k["revoked"]) for k in listed] == [(key_id, "lab-a", False)]
    assert "key" not in listed[0]  # a listing never shows a key

    done = subprocess.run(
        [sys.executable, "-m", "service", "keys", "revoke", key_id, "--redis", redis_url],
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert done.returncode == 0, done.stderr
    _, listed, _ = keys_command(redis_url, "list")
    assert listed[0]["revoked"] is True
    problem_of(call(app, "GET", "/v1/capabilities", headers=headers), 401)


def test_quota_overrides_are_set_by_the_command_and_shown_to_the_tenant(redis_url: str) -> None:
    _, created, _ = keys_command(
        redis_url, "create", "--tenant", "lab-b", "--max-unfinished-jobs", "3"
    )
    status, quotas, _ = keys_command(
        redis_url, "quotas", "--tenant", "lab-b", "--requests-per-s", "2.5"
    )
    assert status == 0
    assert quotas["max_unfinished_jobs"] == 3 and quotas["requests_per_s"] == 2.5
    app = app_with(redis_url=redis_url, queue=fresh_queue(), auth="keys").test_client()
    answer = call(
        app, "GET", "/v1/capabilities", headers={"Authorization": f"Bearer {created['key']}"}
    )
    shown = answer.get_json()["caller"]["quotas"]
    assert shown["max_unfinished_jobs"] == 3 and shown["requests_per_s"] == 2.5
    _, quotas, _ = keys_command(
        redis_url, "quotas", "--tenant", "lab-b", "--clear", "max_unfinished_jobs"
    )
    assert quotas["max_unfinished_jobs"] != 3  # back to the default


def test_quota_overrides_must_be_positive(redis_url: str) -> None:
    for option, value in (("--requests-per-s", "0"), ("--max-unfinished-jobs", "-1")):
        status, output, said = keys_command(redis_url, "quotas", "--tenant", "lab-c", option, value)
        assert status == 2 and output is None and "positive" in said
    assert not Redis.from_url(redis_url).exists("lacuna:tenant:lab-c")


@pytest.mark.parametrize("tenant", ["public", "Lab A", "a:b", ""])
def test_unusable_tenant_names_are_refused(redis_url: str, tenant: str) -> None:
    status, output, said = keys_command(redis_url, "create", "--tenant", tenant)
    assert status == 2 and output is None and "tenant" in said
    assert not Redis.from_url(redis_url).keys("lacuna:api-key*")


def test_the_keys_command_needs_the_servers_redis() -> None:
    env = {k: v for k, v in os.environ.items() if k != "LACUNA_REDIS_URL"}
    done = subprocess.run(
        [sys.executable, "-m", "service", "keys", "list"],
        capture_output=True,
        text=True,
        timeout=60,
        env=env,
    )
    assert done.returncode == 2 and "--redis" in done.stderr


@pytest.mark.parametrize(
    ("host", "auth", "open_access", "access", "says"),
    [
        ("127.0.0.1", None, False, "open", None),
        ("127.1.2.3", None, False, "open", None),
        ("::1", None, False, "open", None),
        ("localhost", None, False, "open", None),
        ("127.0.0.1", "keys", False, "keys", None),
        ("0.0.0.0", None, False, "keys", "keys"),
        ("192.168.1.20", None, False, "keys", "keys"),
        ("lab-server.example", None, False, "keys", "keys"),
        ("0.0.0.0", "open", False, None, "refusing"),
        ("::", "open", False, None, "refusing"),
        ("0.0.0.0", "open", True, "open", "WARNING"),
        ("0.0.0.0", None, True, "open", "WARNING"),
        ("0.0.0.0", "keys", True, "keys", None),
    ],
)
def test_the_bind_rule(
    host: str, auth: Any, open_access: bool, access: str | None, says: str | None
) -> None:
    decision = access_decision(host, auth, open_access)
    assert decision.access == access
    if says is None:
        assert decision.message is None
    else:
        assert decision.message is not None and says in decision.message


def test_serve_on_0_0_0_0_in_open_mode_refuses_to_start(redis_url: str) -> None:
    port = free_port()
    for extra, env in (
        (["--auth", "open"], {}),
        ([], {"LACUNA_AUTH": "open"}),
    ):
        done = subprocess.run(
            [LACUNA, "serve", "--host", "0.0.0.0", "--port", str(port), "--redis", redis_url]
            + extra,
            capture_output=True,
            text=True,
            timeout=60,
            env={**os.environ, **env},
        )
        assert done.returncode == 2, done.stderr
        assert "refusing open access" in done.stderr and "--open-access" in done.stderr
        with socket.socket() as probe:  # nothing was started: nothing listens on the port
            assert probe.connect_ex(("127.0.0.1", port)) != 0


def test_serve_with_keys_passes_the_mode_down_to_the_api(redis_url: str) -> None:
    key = KeyStore(Redis.from_url(redis_url)).create("lab-a").key
    port = free_port()
    process = subprocess.Popen(
        [LACUNA, "serve", "--redis", redis_url, "--port", str(port), "--auth", "keys"]
        + ["--local-workers", "0", "--http-workers", "1"],
        env={**os.environ, "LACUNA_QUEUE": fresh_queue()},
        stderr=subprocess.DEVNULL,
    )
    base = f"http://127.0.0.1:{port}"
    try:
        wait_until(lambda: answers(base + "/healthz") is not None, 60, f"{base}/healthz")
        refused = requests.get(base + "/v1/capabilities", timeout=10)
        assert refused.status_code == 401 and refused.headers["WWW-Authenticate"].startswith(
            "Bearer"
        )
        admitted = requests.get(
            base + "/v1/capabilities", headers={"Authorization": f"Bearer {key}"}, timeout=10
        )
        assert admitted.status_code == 200
        caller = admitted.json()["caller"]
        assert (caller["tenant"], caller["access"]) == ("lab-a", "keys")
    finally:
        stop(process, signal.SIGTERM)
