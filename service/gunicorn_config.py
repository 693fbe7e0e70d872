"""gunicorn's configuration of the API: ``gunicorn -c python:service.gunicorn_config``.

gunicorn reads this module in its master process, before it forks the worker processes.
"""

import os
from typing import Any

from prometheus_client import multiprocess

from service.logs import gunicorn_log_config
from service.metrics import MULTIPROCESS_VARIABLE
from service.settings import Settings

# --- Observability: JSON log lines, and prometheus_client's multiprocess mode ----------------

logconfig_dict = gunicorn_log_config(Settings().log_format)


def child_exit(server: Any, worker: Any) -> None:
    """A worker process ended: drop its live gauges' files (its counters stay counted)."""
    if os.environ.get(MULTIPROCESS_VARIABLE):
        multiprocess.mark_process_dead(worker.pid)
