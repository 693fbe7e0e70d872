"""gunicorn's settings for the API: ``gunicorn --config python:service.gunicorn_config``.

Read by gunicorn's arbiter before it forks the workers; `lacuna serve` passes it on its
command line (service/stack.py), and the command line's own options win over these.
"""

worker_class = "service.http_worker.ProblemThreadWorker"
"""gunicorn's gthread worker with its own error answers (414, 431, 400...) as problem+json."""
