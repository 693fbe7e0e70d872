"""How a worker process logs: JSON lines (``workers.spec.log_lines``) or plain text.

In JSON, a line written while a job runs carries the job's id and the request id it was
submitted under (``job.meta['request_id']``), read from RQ's current job.
"""

import logging
import sys
from typing import Literal

from rq import get_current_job

from workers.spec.log_lines import JsonLogFormatter

__all__ = ["JobContext", "configure_logging"]

TEXT_FORMAT = "%(asctime)s %(name)s %(levelname)s %(message)s"


class JobContext(logging.Filter):
    """Adds ``job_id`` and ``request_id`` of the job this process is running, if any."""

    def filter(self, record: logging.LogRecord) -> bool:
        if getattr(record, "job_id", None) is None:
            job = get_current_job()
            if job is not None:
                record.job_id = job.id
                record.request_id = job.meta.get("request_id")
        return True


def configure_logging(log_format: Literal["json", "text"], level: str | int) -> None:
    """One handler on the root logger, on stderr; RQ's loggers then log through it too (RQ
    adds its own handlers only when none is found above its loggers)."""
    handler = logging.StreamHandler(sys.stderr)
    if log_format == "json":
        handler.setFormatter(JsonLogFormatter())
        handler.addFilter(JobContext())
    else:
        handler.setFormatter(logging.Formatter(TEXT_FORMAT))
    root = logging.getLogger()
    root.handlers[:] = [handler]
    root.setLevel(level.upper() if isinstance(level, str) else level)
