"""The one shape of lacuna's log lines: one JSON object per line, API and workers alike.

Keys: ``timestamp`` (RFC 3339, UTC, milliseconds), ``level``, ``logger``, ``message``, then
``request_id`` and ``job_id`` when the line concerns a request or a job, then the record's
own ``fields`` (``logger.info(..., extra={"fields": {...}})``), then ``exception`` with the
traceback. A key that is unknown is left out rather than written as null. Both the API
(``service.logs``) and the workers (``workers.logs``) format with this class, so one query
finds a request's lines on every machine.
"""

import json
import logging
from collections.abc import Mapping
from datetime import UTC, datetime
from typing import Any

__all__ = ["CONTEXT_KEYS", "JsonLogFormatter"]

CONTEXT_KEYS = ("request_id", "job_id")
"""Record attributes (set by a filter or ``extra=``) copied into every line that has them."""

_BASE_KEYS = frozenset(("timestamp", "level", "logger", "message", *CONTEXT_KEYS))


class JsonLogFormatter(logging.Formatter):
    """A log record as one line of JSON (no newline inside: tracebacks are escaped)."""

    def format(self, record: logging.LogRecord) -> str:
        line: dict[str, Any] = {
            "timestamp": _rfc3339(record.created),
            "level": record.levelname,
            "logger": record.name,
            "message": self.message_of(record),
        }
        for key in CONTEXT_KEYS:
            value = getattr(record, key, None)
            if value is not None:
                line[key] = value
        for key, value in self.fields_of(record).items():
            if key not in _BASE_KEYS and value is not None:
                line[key] = value
        if record.exc_info:
            line["exception"] = self.formatException(record.exc_info)
        if record.stack_info:
            line["stack"] = self.formatStack(record.stack_info)
        return json.dumps(line, ensure_ascii=False, default=str)

    def message_of(self, record: logging.LogRecord) -> str:
        return record.getMessage()

    def fields_of(self, record: logging.LogRecord) -> Mapping[str, Any]:
        """The record's own keys: its ``fields`` attribute, if a mapping."""
        fields = getattr(record, "fields", None)
        return fields if isinstance(fields, Mapping) else {}


def _rfc3339(created: float) -> str:
    moment = datetime.fromtimestamp(created, UTC)
    return moment.isoformat(timespec="milliseconds").replace("+00:00", "Z")
