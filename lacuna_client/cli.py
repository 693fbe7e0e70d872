"""The ``lacuna`` command: ``submit``, ``status``, ``fetch`` and ``cancel`` talk to a service
(``--server``, or LACUNA_URL; ``--api-key``, or LACUNA_API_KEY); ``serve``, ``worker``,
``demo``, ``openapi`` and ``keys`` are programs of the server, which this command runs when
the server is installed (``lacuna[server]``).

Exit codes: 0 success, 1 a job failed (or the service could not be reached), 2 usage error.

Only the standard library is imported at start, so ``lacuna --help`` is quick; requests and
numpy come with the client commands, the server's modules only in the programs it runs.
"""

import argparse
import importlib.util
import json
import os
import sys
from pathlib import Path
from typing import Any, NamedTuple

__all__ = ["PROGRAMS", "build_parser", "main"]

FAILED, USAGE = 1, 2

DEFAULT_URL = "http://127.0.0.1:8000"


class Program(NamedTuple):
    """A server's command, a program of its own: ``python -m module *arguments ...``."""

    module: str
    arguments: tuple[str, ...]
    help: str


PROGRAMS = {
    "serve": Program("service", ("serve",), "run the HTTP API, workers and (if needed) Redis"),
    "worker": Program("workers", (), "run a job worker"),
    "demo": Program("workers.scenario", (), "write the synthetic demo data sets"),
    "openapi": Program("service", ("openapi",), "print or write the OpenAPI document"),
    "keys": Program("service", ("keys",), "create, list and revoke API keys of tenants"),
}
"""``lacuna serve ...`` runs ``python -m service serve ...``, ``lacuna worker ...`` runs
``python -m workers ...``, and so on."""

SERVER_MODULES = ("service", "workers", "flask", "rq")
"""What the server's programs need: its packages and the libraries of the ``server`` extra
(a client install has the packages but not the libraries)."""


def _program(command: str, rest: list[str]) -> int:
    """Exec the server's program for ``command``: one process that receives the signals, and
    the client never imports the server. Exit 2 when the server is not installed."""
    missing = [name for name in SERVER_MODULES if importlib.util.find_spec(name) is None]
    if missing:
        sys.stderr.write(
            f"lacuna {command}: the server is not installed (no {', '.join(missing)}): "
            "pip install 'lacuna[server]'\n"
        )
        return USAGE
    program = PROGRAMS[command]
    os.execv(sys.executable, [sys.executable, "-m", program.module, *program.arguments, *rest])


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
    from lacuna_client.client import Client  # requests and numpy only for client commands

    return Client(args.server, api_key=args.api_key, timeout=args.http_timeout)


def _print(args: argparse.Namespace, document: Any, text: str) -> None:
    sys.stdout.write(json.dumps(document) + "\n" if args.json else text + "\n")


def _submit(args: argparse.Namespace) -> int:
    from tqdm import tqdm

    from lacuna_client.batch import BatchError, BatchOptions, LayoutMismatch, run_batch

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


def _client_commands(commands: Any) -> None:
    """The submit, status, fetch and cancel parsers."""
    # The client has no settings library on purpose (it installs without pydantic): the two
    # variables it reads are the defaults of these options.
    url = os.environ.get("LACUNA_URL", DEFAULT_URL)
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("--server", default=url, help="service URL (LACUNA_URL)")
    common.add_argument(
        "--api-key",
        default=os.environ.get("LACUNA_API_KEY"),
        help="API key of a shared server, sent as Authorization: Bearer (LACUNA_API_KEY)",
    )
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


def build_parser() -> argparse.ArgumentParser:
    """Every command; the server's are listed here and parse their own options."""
    parser = argparse.ArgumentParser(prog="lacuna", description="Persistent homology service.")
    commands = parser.add_subparsers(dest="command", required=True)
    for name, program in PROGRAMS.items():
        commands.add_parser(name, help=f"{program.help} (see lacuna {name} --help)", add_help=False)
    _client_commands(commands)
    return parser


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    if argv[:1] and argv[0] in PROGRAMS:
        return _program(argv[0], argv[1:])
    args = build_parser().parse_args(argv)
    from lacuna_client.client import LacunaError

    run = {"submit": _submit, "status": _status, "fetch": _fetch, "cancel": _cancel}
    try:
        return run[args.command](args)
    except LacunaError as error:
        if args.json:
            sys.stdout.write(json.dumps({"problem": error.problem}) + "\n")
        sys.stderr.write(f"lacuna {args.command}: {error}\n")
        return FAILED
