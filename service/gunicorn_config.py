"""gunicorn's configuration of the API: ``gunicorn --config python:service.gunicorn_config``.

Read by gunicorn's arbiter before it forks the workers; `lacuna serve` passes it on its
command line (service/stack.py), and the command line's own options win over these.
"""

import os
from typing import Any

from prometheus_client import multiprocess

from service.logs import gunicorn_log_config
from service.metrics import MULTIPROCESS_VARIABLE
from service.settings import Settings

worker_class = "service.http_worker.ProblemThreadWorker"
"""gunicorn's gthread worker with its own error answers (414, 431, 400...) as problem+json."""

# --- Observability: JSON log lines, and prometheus_client's multiprocess mode ----------------

logconfig_dict = gunicorn_log_config(Settings().log_format)


def child_exit(server: Any, worker: Any) -> None:
    """A worker process ended: drop its live gauges' files (its counters stay counted)."""
    if os.environ.get(MULTIPROCESS_VARIABLE):
        multiprocess.mark_process_dead(worker.pid)
