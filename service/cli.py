"""The ``lacuna`` command: ``serve``, ``worker``, ``demo`` and ``openapi``."""

import argparse
import os
import sys
from pathlib import Path

from service.settings import Settings

__all__ = ["main"]


def _serve(args: argparse.Namespace, settings: Settings) -> int:
    from service.stack import StackOptions, run_stack

    return run_stack(
        StackOptions(
            host=args.host,
            port=args.port,
            redis_url=args.redis,
            http_workers=args.http_workers,
            threads=args.threads,
            local_workers=args.local_workers,
            queue=settings.queue,
            # a waiting request must not be killed as a stuck worker
            http_timeout_s=settings.max_wait_s + 60,
        )
    )


def _program(module: str, rest: list[str]) -> int:
    # Workers and the demo generators are programs of their own (python -m ...), so the HTTP
    # layer never imports the numerical code; exec keeps one process that receives signals.
    os.execv(sys.executable, [sys.executable, "-m", module, *rest])


def _openapi(args: argparse.Namespace) -> int:
    from service.openapi import openapi_text

    text = openapi_text()
    if args.out is None:
        sys.stdout.write(text)
    else:
        Path(args.out).write_text(text, encoding="utf-8")
    return 0


def main(argv: list[str] | None = None) -> int:
    settings = Settings()
    parser = argparse.ArgumentParser(prog="lacuna", description="Persistent homology service.")
    commands = parser.add_subparsers(dest="command", required=True)

    serve = commands.add_parser("serve", help="run the HTTP API, workers and (if needed) Redis")
    serve.add_argument(
        "--redis",
        default=settings.redis_url,
        help="shared Redis URL (LACUNA_REDIS_URL); unset: embedded Redis",
    )
    serve.add_argument("--host", default=settings.host, help="listen address (LACUNA_HOST)")
    serve.add_argument("--port", type=int, default=settings.port, help="port (LACUNA_PORT)")
    serve.add_argument(
        "--http-workers",
        type=int,
        default=settings.http_workers,
        help="gunicorn worker processes (LACUNA_HTTP_WORKERS)",
    )
    serve.add_argument(
        "--threads",
        type=int,
        default=settings.http_threads,
        help="threads per gunicorn worker (LACUNA_HTTP_THREADS)",
    )
    serve.add_argument(
        "--local-workers",
        type=int,
        default=settings.local_workers,
        help="job workers started on this machine, 0: API only (LACUNA_LOCAL_WORKERS)",
    )

    commands.add_parser(
        "worker", help="run a job worker (see lacuna worker --help)", add_help=False
    )
    commands.add_parser(
        "demo",
        help="write the synthetic demo data sets (see lacuna demo --help)",
        add_help=False,
    )

    openapi = commands.add_parser("openapi", help="print or write the OpenAPI document")
    openapi.add_argument("--out", default=None, help="file to write (default: stdout)")

    argv = sys.argv[1:] if argv is None else argv
    programs = {"worker": "workers", "demo": "workers.scenario"}
    if argv[:1] and argv[0] in programs:
        return _program(programs[argv[0]], argv[1:])
    args = parser.parse_args(argv)
    if args.command == "serve":
        return _serve(args, settings)
    return _openapi(args)
