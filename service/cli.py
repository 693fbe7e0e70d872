"""The ``lacuna`` command: ``serve``, ``worker``, ``demo`` and ``openapi`` run the service;
``submit``, ``status``, ``fetch`` and ``cancel`` talk to one (``--server``, or LACUNA_URL).

Exit codes: 0 success, 1 a job failed (or the service could not be reached), 2 usage error.
"""

import argparse
import json
import os
import sys
from pathlib import Path
from typing import Any

from pydantic import Field
from pydantic_settings import BaseSettings, SettingsConfigDict

from service.settings import Settings

__all__ = ["PROGRAMS", "build_parser", "main"]

FAILED, USAGE = 1, 2


class ClientSettings(BaseSettings):
    """Where the client commands find the service."""

    model_config = SettingsConfigDict(env_prefix="LACUNA_", extra="ignore")

    url: str = Field("http://127.0.0.1:8000", description="Base URL of the lacuna service.")
    api_key: str | None = Field(None, description="Sent as Authorization: Bearer <key>.")


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


def _json_option(text: str, what: str) -> Any:
    """A JSON value given inline, or as @file / a path to a .json file."""
    source = text[1:] if text.startswith("@") else text
    if text.startswith("@") or source.endswith(".json"):
        try:
            source = Path(source).read_text(encoding="utf-8")
        except OSError as error:
            raise argparse.ArgumentTypeError(f"{what}: {error}") from None
    try:
        return json.loads(source)
    except ValueError as error:
        raise argparse.ArgumentTypeError(f"{what}: not JSON ({error})") from None


def _filtration(text: str) -> dict[str, Any]:
    if text.isidentifier():  # a bare name: {"type": name}
        return {"type": text}
    value = _json_option(text, "--filtration")
    if not isinstance(value, dict):
        raise argparse.ArgumentTypeError("--filtration: expected a JSON object or a name")
    return value


def _features(text: str) -> list[dict[str, Any]]:
    value = _json_option(text, "--features")
    items = value if isinstance(value, list) else [value]
    if not items or not all(isinstance(item, dict) for item in items):
        raise argparse.ArgumentTypeError(
            "--features: expected a feature spec (JSON object) or a list of them"
        )
    return items


def _floats(text: str) -> list[float]:
    try:
        return [float(part) for part in text.split(",")]
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"expected numbers separated by commas: {text!r}"
        ) from None


def _client(args: argparse.Namespace) -> Any:
    from service.client import Client  # requests and numpy only for the client commands

    return Client(args.server, api_key=args.api_key, timeout=args.http_timeout)


def _print(args: argparse.Namespace, document: Any, text: str) -> None:
    sys.stdout.write(json.dumps(document) + "\n" if args.json else text + "\n")


def _submit(args: argparse.Namespace) -> int:
    from tqdm import tqdm

    from service.batch import BatchError, BatchOptions, LayoutMismatch, run_batch

    options = BatchOptions(
        input_type=args.input_type,
        filtration=args.filtration,
        features=args.features,
        spacing=args.spacing,
        units=args.units,
        columns=args.columns.split(",") if args.columns else None,
        skeletonize=args.skeletonize,
    )
    paths = [Path(name) for name in args.files]
    bar = tqdm(total=len(paths), unit="file", disable=args.quiet or None, file=sys.stderr)
    try:
        jobs = run_batch(
            _client(args),
            paths,
            options,
            args.out,
            on_done=lambda job: bar.update(1),
            timeout=args.timeout,
        )
    except BatchError as error:  # a file that cannot be sent (usage), or vectors that don't stack
        bar.close()
        sys.stderr.write(f"lacuna submit: {error}\n")
        return FAILED if isinstance(error, LayoutMismatch) else USAGE
    bar.close()
    failed = [job for job in jobs if job.result is None]
    summary = {
        "files": len(jobs),
        "succeeded": len(jobs) - len(failed),
        "failed": [
            {"file": str(job.path), "job_id": job.job_id, "problem": job.problem} for job in failed
        ],
        "jobs": [{"file": str(job.path), "job_id": job.job_id} for job in jobs],
    }
    lines = [f"{len(jobs) - len(failed)} of {len(jobs)} jobs succeeded"]
    lines += [
        f"  {job.path}: {(job.problem or {}).get('title')}: {(job.problem or {}).get('detail')}"
        for job in failed
    ]
    _print(args, summary, "\n".join(lines))
    return FAILED if failed else 0


def _status(args: argparse.Namespace) -> int:
    status = _client(args).status(args.job_id)
    text = status["status"]
    if status.get("progress"):
        text += f" ({status['progress']['done']} of {status['progress']['total']})"
    if status.get("problem"):
        text += f": {status['problem'].get('title')}: {status['problem'].get('detail')}"
    _print(args, status, text)
    return FAILED if status["status"] in ("failed", "cancelled") else 0


def _fetch(args: argparse.Namespace) -> int:
    result = _client(args).result(args.job_id, args.timeout)
    if args.out is None:
        sys.stdout.write(json.dumps(result) + "\n")
    else:
        Path(args.out).write_text(json.dumps(result) + "\n", encoding="utf-8")
    return 0


def _cancel(args: argparse.Namespace) -> int:
    status = _client(args).cancel(args.job_id)
    _print(args, status, status["status"])
    return 0


def _client_commands(commands: Any, settings: ClientSettings) -> None:
    """The submit, status, fetch and cancel parsers."""
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("--server", default=settings.url, help="service URL (LACUNA_URL)")
    common.add_argument("--api-key", default=settings.api_key, help="(LACUNA_API_KEY)")
    common.add_argument("--json", action="store_true", help="machine-readable output")
    common.add_argument(
        "--http-timeout", type=float, default=60.0, help="seconds per HTTP call (default 60)"
    )
    waiting = argparse.ArgumentParser(add_help=False)
    waiting.add_argument(
        "--timeout",
        type=float,
        default=None,
        help="seconds to wait for each job (default: no limit)",
    )

    submit = commands.add_parser(
        "submit",
        parents=[common, waiting],
        help="submit files as jobs, wait, write results and stacked vectors",
        description="Submit each file as a job, show progress, write <stem>.result.json per "
        "file and vectors.npy / vectors.csv / vectors.json (one row per file).",
    )
    submit.add_argument("files", nargs="+", help=".npy .csv .tif .tiff .png .graphml .json")
    submit.add_argument(
        "--input-type",
        choices=["points", "image", "mask", "graph"],
        help="what the files hold (default by extension: .csv points, .npy/.tif/.png image, "
        ".graphml/.json graph)",
    )
    submit.add_argument(
        "--filtration",
        type=_filtration,
        help='a name ("rips", "cubical", ...) or a JSON object / @file.json '
        "(default: rips for points, cubical for images, distance for masks)",
    )
    submit.add_argument(
        "--features", type=_features, help="feature spec(s): a JSON file, @file or inline JSON"
    )
    submit.add_argument("--spacing", type=_floats, help="pixel or voxel spacing, e.g. 0.5,0.5")
    submit.add_argument("--units", help="units of coordinates or spacing, e.g. um")
    submit.add_argument("--columns", help="coordinate columns of .csv tables (default x,y[,z])")
    submit.add_argument(
        "--skeletonize", action="store_true", help="masks: work on the skeleton graph"
    )
    submit.add_argument(
        "--out",
        type=Path,
        default=None,
        help="directory for results (default: next to each "
        "input; vectors.* in the current directory)",
    )
    submit.add_argument("--quiet", action="store_true", help="no progress bar")

    for name, what in (("status", "show a job's state"), ("cancel", "cancel a job")):
        command = commands.add_parser(name, parents=[common], help=what)
        command.add_argument("job_id")
    fetch = commands.add_parser(
        "fetch", parents=[common, waiting], help="write a job's result (waits for it)"
    )
    fetch.add_argument("job_id")
    fetch.add_argument("--out", default=None, help="file to write (default: stdout)")


def build_parser(settings: Settings) -> argparse.ArgumentParser:
    """Every command but ``worker`` and ``demo`` (programs of their own, with own parsers)."""
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
    _client_commands(commands, ClientSettings())
    return parser


PROGRAMS = {"worker": "workers", "demo": "workers.scenario"}
"""Commands that are programs of their own: ``lacuna worker ...`` is ``python -m workers ...``."""


def main(argv: list[str] | None = None) -> int:
    settings = Settings()
    argv = sys.argv[1:] if argv is None else argv
    if argv[:1] and argv[0] in PROGRAMS:
        return _program(PROGRAMS[argv[0]], argv[1:])
    args = build_parser(settings).parse_args(argv)
    if args.command == "serve":
        return _serve(args, settings)
    if args.command == "openapi":
        return _openapi(args)
    from service.client import LacunaError

    run = {"submit": _submit, "status": _status, "fetch": _fetch, "cancel": _cancel}
    try:
        return run[args.command](args)
    except LacunaError as error:
        if args.json:
            sys.stdout.write(json.dumps({"problem": error.problem}) + "\n")
        sys.stderr.write(f"lacuna {args.command}: {error}\n")
        return FAILED
