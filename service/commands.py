"""``python -m service serve|openapi``: the server's own commands, which ``lacuna serve`` and
``lacuna openapi`` run (the ``lacuna`` command itself imports nothing of the server)."""

import argparse
import sys
from pathlib import Path

from service.settings import Settings

__all__ = ["build_parser", "main"]


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
            data_dir=args.data_dir,
        )
    )


def _openapi(args: argparse.Namespace) -> int:
    from service.openapi import openapi_text

    text = openapi_text()
    if args.out is None:
        sys.stdout.write(text)
    else:
        Path(args.out).write_text(text, encoding="utf-8")
    return 0


def build_parser(settings: Settings) -> argparse.ArgumentParser:
    """The ``serve`` and ``openapi`` parsers, their defaults from ``settings``."""
    parser = argparse.ArgumentParser(prog="lacuna", description="The lacuna server.")
    commands = parser.add_subparsers(dest="command", required=True)

    serve = commands.add_parser("serve", help="run the HTTP API, workers and (if needed) Redis")
    serve.add_argument(
        "--redis",
        default=settings.redis_url,
        help="shared Redis URL (LACUNA_REDIS_URL); unset: embedded Redis",
    )
    serve.add_argument(
        "--data-dir",
        type=Path,
        default=settings.data_dir,
        help="folder the embedded Redis keeps its append-only file in (LACUNA_DATA_DIR); "
        "unset: $XDG_STATE_HOME/lacuna or ~/.local/state/lacuna",
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

    openapi = commands.add_parser("openapi", help="print or write the OpenAPI document")
    openapi.add_argument("--out", default=None, help="file to write (default: stdout)")
    return parser


def main(argv: list[str] | None = None) -> int:
    settings = Settings()
    args = build_parser(settings).parse_args(argv)
    if args.command == "serve":
        return _serve(args, settings)
    return _openapi(args)
