"""gunicorn's thread worker, with the errors gunicorn itself answers as RFC 9457 problems.

Before a request reaches Flask, gunicorn refuses what it cannot parse: a request line over
``limit_request_line`` (414), header fields over their limits (431), a malformed request line,
method, version, header or chunk (400), and a few more. Its stock answer is an HTML page; this
worker answers the same statuses as ``application/problem+json`` with ``type: about:blank``
(RFC 9457 section 4.2.1), like the app's own HTTP errors.

Why a worker class: these errors happen in the worker's request parser, before any WSGI code
runs, and ``handle_error`` is the one method every one of them passes through. Raising the
limits and enforcing them in the app instead would leave a malformed request line (a 400)
answered in HTML, and an unlimited request line costs memory before the app is ever called.
"""

import json
import ssl
import uuid
from typing import Any

from gunicorn import util
from gunicorn.http.errors import (
    ConfigurationProblem,
    ExpectationFailed,
    ForbiddenProxyRequest,
    InvalidResponseHeader,
    InvalidResponseHeaderName,
    LimitRequestHeaders,
    LimitRequestLine,
    ParseException,
    UnsupportedTransferCoding,
)
from gunicorn.workers.gthread import ThreadWorker

from workers.spec.problems import Problem, problem_of_kind

__all__ = ["ProblemThreadWorker", "problem_answer", "status_of"]

_STATUSES: tuple[tuple[type[BaseException] | tuple[type[BaseException], ...], int, str], ...] = (
    # A header the application tried to send is the application's fault (gunicorn's rule).
    (
        (InvalidResponseHeader, InvalidResponseHeaderName, ConfigurationProblem),
        500,
        "Internal Server Error",
    ),
    (LimitRequestLine, 414, "URI Too Long"),
    (LimitRequestHeaders, 431, "Request Header Fields Too Large"),
    (ExpectationFailed, 417, "Expectation Failed"),
    (UnsupportedTransferCoding, 501, "Not Implemented"),
    ((ForbiddenProxyRequest, ssl.SSLError), 403, "Forbidden"),
    (ParseException, 400, "Bad Request"),
)
"""gunicorn's exceptions in the order its own handle_error tests them, with the status and
reason phrase (RFC 9110 section 15) it answers; anything else is a 500."""

_DETAIL_CHARACTERS = 300
"""gunicorn's messages quote the request line: only this much of it goes back."""


def status_of(error: BaseException) -> tuple[int, str]:
    """The status and reason phrase gunicorn answers ``error`` with (500 for its own)."""
    for kinds, status, reason in _STATUSES:
        if isinstance(error, kinds):
            return status, reason
    return 500, "Internal Server Error"


def problem_answer(error: BaseException, request_id: str) -> tuple[int, bytes]:
    """The status and the whole HTTP/1.1 answer (head and problem+json body) to ``error``;
    a 500 quotes ``request_id`` (which the caller logs) instead of the error's words."""
    status, reason = status_of(error)
    problem: Problem
    if status == 500:
        problem = problem_of_kind(
            "internal-error",
            f"an unexpected error occurred; quote request id {request_id}",
            request_id=request_id,
        )
    else:
        detail = str(error) or reason
        if len(detail) > _DETAIL_CHARACTERS:
            detail = detail[:_DETAIL_CHARACTERS] + "..."
        problem = Problem(title=reason, status=status, detail=detail)
    body = json.dumps(problem.model_dump(mode="json", exclude_none=True)).encode()
    head = (
        f"HTTP/1.1 {status} {reason}\r\nConnection: close\r\n"
        f"Content-Type: application/problem+json\r\nContent-Length: {len(body)}\r\n\r\n"
    )
    return status, head.encode("latin-1") + body


class ProblemThreadWorker(ThreadWorker):  # type: ignore[misc]  # gunicorn has no types
    """gunicorn's gthread worker whose own error answers are problem+json."""

    def handle_error(self, req: Any, client: Any, addr: Any, exc: BaseException) -> None:
        request_id = uuid.uuid4().hex
        status, answer = problem_answer(exc, request_id)
        if status == 500:
            uri = getattr(req, "uri", "(no URI read)")
            self.log.exception("Error handling request %s (request id %s)", uri, request_id)
        else:
            host = addr[0] if addr else ""
            self.log.warning("Invalid request from ip=%s: %s", host, str(exc)[:_DETAIL_CHARACTERS])
        try:
            util.write_nonblock(client, answer)
        except Exception:  # the client has gone: nothing more to tell it
            self.log.debug("Failed to send error message.")
