"""The worker's own error answers keep gunicorn's statuses (its stock handle_error is the
reference) and change only the body: RFC 9457 problem+json instead of an HTML page."""

import json
import logging
import ssl
from types import SimpleNamespace
from typing import Any

import pytest
from gunicorn.http import errors
from gunicorn.workers.base import Worker

from service.http_worker import ProblemThreadWorker, problem_answer

CLIENT_ERRORS = [
    errors.InvalidRequestLine("GARBAGE"),
    errors.InvalidRequestMethod("G@T"),
    errors.InvalidHTTPVersion("HTTP/7.1"),
    errors.InvalidHeader("X-A"),
    errors.InvalidHeaderName("Bad Name"),
    errors.ObsoleteFolding("X-B"),
    errors.ExpectationFailed("100-wait"),
    errors.UnsupportedTransferCoding("gzip, chunked"),
    errors.ConfigurationProblem("bad setting"),
    errors.InvalidChunkSize(b"zz"),
    errors.ChunkMissingTerminator(b"xx"),
    errors.InvalidChunkExtension("a NUL"),
    errors.LimitRequestLine(20_000, 4094),
    errors.LimitRequestHeaders("limit request headers fields"),
    errors.InvalidProxyLine("PROXY nonsense"),
    errors.ForbiddenProxyRequest("10.0.0.1"),
    errors.InvalidSchemeHeaders(),
    errors.InvalidH2CPreface(b"PRI"),
    errors.InvalidResponseHeader("X-C"),
    ssl.SSLError("handshake"),
    RuntimeError("a bug"),
]


class _Socket:
    """What gunicorn's write_nonblock needs of a socket, keeping what is written."""

    def __init__(self) -> None:
        self.sent = b""

    def gettimeout(self) -> float:
        return 0.0

    def sendall(self, data: bytes) -> None:
        self.sent += data


def _stock_status(error: BaseException) -> int:
    """The status gunicorn's own Worker.handle_error answers ``error`` with."""
    sock = _Socket()
    quiet = logging.getLogger("tests.gunicorn-reference")
    quiet.disabled = True
    Worker.handle_error(SimpleNamespace(log=quiet), None, sock, ("127.0.0.1", 1), error)
    return int(sock.sent.split(b" ", 2)[1])


@pytest.mark.parametrize("error", CLIENT_ERRORS, ids=[type(e).__name__ for e in CLIENT_ERRORS])
def test_statuses_are_gunicorns_and_bodies_are_problems(error: BaseException) -> None:
    status, answer = problem_answer(error, "0" * 32)
    assert status == _stock_status(error)
    head, _, body = answer.partition(b"\r\n\r\n")
    lines = head.decode("latin-1").split("\r\n")
    assert lines[0].startswith(f"HTTP/1.1 {status} ")
    assert "Content-Type: application/problem+json" in lines
    assert f"Content-Length: {len(body)}" in lines
    problem = json.loads(body)
    assert problem["status"] == status and problem["title"] and problem["detail"]
    if status == 500:  # never the error's own words: a request id to quote instead
        assert problem["type"].endswith("internal-error") and "request id" in problem["detail"]
    else:
        assert problem["type"] == "about:blank"  # RFC 9457 section 4.2.1


def test_a_long_request_line_is_not_echoed_whole() -> None:
    _, answer = problem_answer(errors.InvalidRequestLine("G" * 20_000), "0" * 32)
    assert len(answer) < 1000


def test_the_request_id_a_500_quotes_is_in_the_log(caplog: pytest.LogCaptureFixture) -> None:
    # What an operator is asked about must be findable: the id the client quotes is logged.
    sock = _Socket()
    log = logging.getLogger("tests.problem-worker")
    with caplog.at_level(logging.ERROR, logger=log.name):
        worker: Any = SimpleNamespace(log=log)  # handle_error uses only the worker's log
        ProblemThreadWorker.handle_error(
            worker, None, sock, ("127.0.0.1", 1), RuntimeError("a bug")
        )
    problem = json.loads(sock.sent.partition(b"\r\n\r\n")[2])
    assert problem["status"] == 500 and problem["request_id"] in problem["detail"]
    assert problem["request_id"] in caplog.text
