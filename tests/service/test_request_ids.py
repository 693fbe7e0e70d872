"""Request ids: from the X-Request-Id header (or made) to the answer, problems, the job's meta
and payload, its result's provenance and the worker's log lines; and log lines as JSON."""

import json
import logging
import re
import sys
import uuid
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import pytest
import requests
from flask.testing import FlaskClient
from rq.job import Job
from rq.serializers import JSONSerializer

from service.settings import Settings
from tests.support.api import WAIT, call, fresh_queue, post, problem_of
from tests.support.bodies import rips_job
from tests.support.gunicorn import running_gunicorn
from tests.support.waiting import wait_until
from tests.support.worker_process import start_worker, stop_worker
from workers.spec.log_lines import JsonLogFormatter

HEADER = "X-Request-Id"
HEX32 = re.compile(r"[0-9a-f]{32}")


def json_lines(text: str) -> list[dict[str, Any]]:
    """Each line of ``text`` as a JSON object; fails on a line that is not one."""
    lines = []
    for line in text.splitlines():
        parsed = json.loads(line)
        assert isinstance(parsed, dict), line
        lines.append(parsed)
    return lines


def rfc3339_utc(stamp: str) -> datetime:
    # RFC 3339 section 5.6: full-date "T" full-time, "Z" for UTC.
    assert re.fullmatch(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d(\.\d+)?Z", stamp), stamp
    return datetime.fromisoformat(stamp)


@pytest.mark.parametrize("offered", ["trace-7f3a", "0af7651916cd43dd8448eb211c80319c", "a:b.c=d"])
def test_a_sane_id_is_echoed(client: FlaskClient, offered: str) -> None:
    answer = call(client, "GET", "/healthz", headers={HEADER: offered})
    assert answer.headers[HEADER] == offered


@pytest.mark.parametrize("offered", [None, "", "has space", "x" * 129, "naïve", "-lead", "a\tb"])
def test_otherwise_one_is_made(client: FlaskClient, offered: str | None) -> None:
    headers = {} if offered is None else {HEADER: offered}
    first = call(client, "GET", "/healthz", headers=headers).headers[HEADER]
    second = call(client, "GET", "/healthz", headers=headers).headers[HEADER]
    assert HEX32.fullmatch(first) and HEX32.fullmatch(second)
    assert first != second  # uuid4: one per request


def test_problems_carry_the_request_id(client: FlaskClient) -> None:
    missing = call(client, "GET", f"/v1/jobs/{uuid.uuid4()}", headers={HEADER: "trace-404"})
    assert problem_of(missing, 404)["request_id"] == "trace-404"
    assert missing.headers[HEADER] == "trace-404"
    invalid = post(client, "/v1/jobs", {"input": {}}, headers={HEADER: "trace-422"})
    assert problem_of(invalid, 422)["request_id"] == "trace-422"
    made = call(client, "GET", "/v1/no-such-route")
    assert problem_of(made, 404)["request_id"] == made.headers[HEADER]


def test_the_id_travels_to_the_job_and_its_result(
    client: FlaskClient, settings: Settings, tmp_path: Path
) -> None:
    assert settings.redis_url is not None
    log = tmp_path / "worker.log"
    with log.open("wb") as stderr:
        worker = start_worker(settings.redis_url, settings.queue, log_level="INFO", stderr=stderr)
        try:
            answer = post(client, "/v1/jobs", rips_job(), headers={**WAIT, HEADER: "trace-job-1"})
            assert answer.status_code == 200, answer.get_data(as_text=True)
            result = answer.get_json()
        finally:
            stop_worker(worker)
    assert answer.headers[HEADER] == "trace-job-1"
    assert result["provenance"]["request_id"] == "trace-job-1"
    job_id = result["job_id"]
    redis = client.application.extensions["lacuna"].queue.redis
    job = Job.fetch(job_id, connection=redis, serializer=JSONSerializer)
    assert job.meta["request_id"] == "trace-job-1"
    assert job.args[0]["request_id"] == "trace-job-1"
    # The worker's log: JSON lines only; the job's closing line names the job and the id.
    lines = json_lines(log.read_text())
    assert lines and all(rfc3339_utc(line["timestamp"]).tzinfo == UTC for line in lines)
    assert {"level", "logger", "message"} <= set(lines[0])
    ended = [line for line in lines if line.get("job_id") == job_id]
    assert ended, lines
    assert all(line["request_id"] == "trace-job-1" for line in ended)
    closing = [line for line in ended if line["logger"] == "workers.metrics"]
    assert len(closing) == 1 and closing[0]["outcome"] == "succeeded", ended


def test_api_logs_are_json_lines(redis_url: str, tmp_path: Path) -> None:
    # A real gunicorn (two processes) as `lacuna serve` starts it; its whole stderr parses.
    with running_gunicorn(redis_url, fresh_queue(), tmp_path) as (base, log):
        answer = requests.get(base + "/v1/capabilities", headers={HEADER: "trace-api"}, timeout=10)
        assert answer.headers[HEADER] == "trace-api"
        queued = requests.post(
            base + "/v1/jobs", json=rips_job(), headers={HEADER: "trace-queued"}, timeout=10
        )
        assert queued.status_code == 202, queued.text

        def logged() -> bool:
            return log.read_text().count("trace-") >= 3  # two access lines, one of the queue

        wait_until(logged, 30, "the lines of both requests")
    lines = json_lines(log.read_text())
    for line in lines:
        rfc3339_utc(line["timestamp"])
        assert line["level"] in {"DEBUG", "INFO", "WARNING", "ERROR", "CRITICAL"}
    assert any(line["logger"] == "gunicorn.error" for line in lines)  # "Booting worker"
    access = [line for line in lines if line.get("request_id") == "trace-api"]
    assert len(access) == 1, access
    assert access[0]["logger"] == "gunicorn.access"
    assert (access[0]["method"], access[0]["path"], access[0]["status"]) == (
        "GET",
        "/v1/capabilities",
        200,
    )
    assert access[0]["duration_s"] >= 0
    # A line written while a request is handled: the queue's, with the job's id.
    mine = [line for line in lines if line.get("request_id") == "trace-queued"]
    assert {line["logger"] for line in mine} == {"gunicorn.access", "service.queue"}, mine
    (written,) = [line for line in mine if line["logger"] == "service.queue"]
    assert written["job_id"] == queued.json()["job_id"]


def test_a_traceback_stays_on_one_line() -> None:
    try:
        raise ValueError("first\nsecond")
    except ValueError:
        record = logging.LogRecord(
            "x", logging.ERROR, __file__, 1, "failed %s", ("here",), sys.exc_info()
        )
    record.job_id = "j-1"
    line = JsonLogFormatter().format(record)
    assert "\n" not in line
    parsed = json.loads(line)
    assert parsed["message"] == "failed here" and parsed["job_id"] == "j-1"
    assert "request_id" not in parsed  # unknown: left out, not null
    assert "ValueError: first\nsecond" in parsed["exception"]


def test_text_logs_when_asked(
    settings: Settings, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    # LACUNA_LOG_FORMAT=text: lines for a person at a terminal, not JSON.
    monkeypatch.setenv("LACUNA_LOG_FORMAT", "text")
    assert settings.redis_url is not None
    log = tmp_path / "worker.log"
    with log.open("wb") as stderr:
        stop_worker(
            start_worker(settings.redis_url, settings.queue, log_level="INFO", stderr=stderr)
        )
    lines = log.read_text().splitlines()
    assert any(" rq.worker INFO " in line for line in lines), lines
    for line in lines:
        with pytest.raises(json.JSONDecodeError):
            json.loads(line)
