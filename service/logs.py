"""How the API logs under gunicorn: JSON lines (``workers.spec.log_lines``) or gunicorn's text.

``gunicorn_log_config`` is gunicorn's ``logconfig_dict`` (``service.gunicorn_config``): the
root logger, gunicorn's error log and its access log all write JSON lines to stderr. A line
written while a request is handled carries its request id (``service.request_ids``) and, on a
route about one job, the job id; an access line carries the method, path, status, duration
and the request id the answer was sent with.
"""

import logging
from collections.abc import Mapping
from typing import Any, Literal

from flask import has_request_context, request

from service.request_ids import REQUEST_ID_HEADER, current_request_id
from workers.spec.log_lines import JsonLogFormatter

__all__ = ["AccessLogFormatter", "RequestContext", "gunicorn_log_config"]


class RequestContext(logging.Filter):
    """Adds ``request_id`` (and ``job_id`` on a job's routes) of the request being handled."""

    def filter(self, record: logging.LogRecord) -> bool:
        if has_request_context() and getattr(record, "request_id", None) is None:
            record.request_id = current_request_id()
            job_id = (request.view_args or {}).get("job_id")
            if job_id is not None and getattr(record, "job_id", None) is None:
                record.job_id = job_id
        return True


class AccessLogFormatter(JsonLogFormatter):
    """gunicorn's access log records (their arguments are gunicorn's "atoms") as JSON lines."""

    def message_of(self, record: logging.LogRecord) -> str:
        atoms = _atoms(record)
        if atoms is None:
            return super().message_of(record)
        return f"{atoms['m']} {atoms['U']} {atoms['s']}"

    def fields_of(self, record: logging.LogRecord) -> Mapping[str, Any]:
        atoms = _atoms(record)
        if atoms is None:
            return super().fields_of(record)
        return {
            "method": atoms["m"],
            "path": atoms["U"],
            "status": int(atoms["s"]) if str(atoms["s"]).isdigit() else atoms["s"],
            "duration_s": atoms["D"] / 1e6 if isinstance(atoms["D"], int) else None,
            "response_bytes": atoms["B"] if isinstance(atoms["B"], int) else None,
            "remote_address": atoms["h"],
            "user_agent": atoms["a"],
        }

    def format(self, record: logging.LogRecord) -> str:
        atoms = _atoms(record)
        if atoms is not None:  # the id the answer was sent with (gunicorn: "-" for none)
            sent = atoms["{" + REQUEST_ID_HEADER.lower() + "}o"]
            record.request_id = None if sent == "-" else sent
        return super().format(record)


def _atoms(record: logging.LogRecord) -> Mapping[str, Any] | None:
    return record.args if isinstance(record.args, Mapping) else None


def gunicorn_log_config(log_format: Literal["json", "text"]) -> dict[str, Any]:
    """gunicorn's ``logconfig_dict``: JSON lines on stderr, or {} for gunicorn's own text."""
    if log_format == "text":
        return {}
    stderr = {"class": "logging.StreamHandler", "stream": "ext://sys.stderr"}
    return {
        "version": 1,
        "disable_existing_loggers": False,
        "formatters": {
            "json": {"()": JsonLogFormatter},
            "access": {"()": AccessLogFormatter},
        },
        "filters": {"request": {"()": RequestContext}},
        "handlers": {
            "json": {**stderr, "formatter": "json", "filters": ["request"]},
            "access": {**stderr, "formatter": "access"},
        },
        "root": {"level": "INFO", "handlers": ["json"]},
        "loggers": {
            "gunicorn.error": {"level": "INFO", "handlers": [], "propagate": True},
            "gunicorn.access": {"level": "INFO", "handlers": ["access"], "propagate": False},
        },
    }
