"""The request id: one token per HTTP request, for following it through logs and jobs.

It is the incoming ``X-Request-Id`` when that is a sane token (a proxy in front may have
set it), else a new uuid4 hex. It is echoed in every answer's ``X-Request-Id``, put into
problem+json answers (``request_id``), the API's log lines, the meta and payload of the jobs
the request queues, and so the worker's log lines and the result's provenance.
"""

import re
import uuid

from flask import Flask, Response, g, has_request_context, request

__all__ = ["REQUEST_ID_HEADER", "current_request_id", "register"]

REQUEST_ID_HEADER = "X-Request-Id"

_SANE = re.compile(r"[A-Za-z0-9][A-Za-z0-9._:=+~-]{0,127}")
"""What an incoming id may be: up to 128 characters, none that would need quoting in a log
line or a header (uuids, hex and base64url tokens all pass)."""


def current_request_id() -> str | None:
    """The id of the request being handled (made on first use), None outside a request."""
    if not has_request_context():
        return None
    found: str | None = g.get("request_id")
    if found is None:
        offered = request.headers.get(REQUEST_ID_HEADER, "")
        found = offered if _SANE.fullmatch(offered) else uuid.uuid4().hex
        g.request_id = found
    return found


def _echo(response: Response) -> Response:
    request_id = current_request_id()
    if request_id is not None:
        response.headers[REQUEST_ID_HEADER] = request_id
    return response


def register(app: Flask) -> None:
    """Echo the id in every answer; called once by the app factory."""
    app.after_request(_echo)
