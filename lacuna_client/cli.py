"""The ``lacuna`` command: ``submit``, ``status``, ``fetch`` and ``cancel`` talk to a service
(``--server``, or LACUNA_URL; ``--api-key``, or LACUNA_API_KEY); ``serve``, ``worker``,
``demo``, ``openapi`` and ``keys`` are programs of the server, which this command runs when
the server is installed (``lacuna[server]``).

Exit codes (also in ``lacuna --help`` and the README):

    0  success
    1  a job failed, or the service refused a request (its problem is printed)
    2  usage error: a bad option, a file that cannot be read or sent
    3  the server could not be reached at --server / LACUNA_URL
    4  the job was cancelled
    5  --timeout ran out before the job ended

``lacuna submit`` of several files exits with the first of 1, 5, 4 that applies to any of
its jobs.

Only the standard library is imported at start, so ``lacuna --help`` is quick; requests and
numpy come with the client commands, the server's modules only in the programs it runs.
"""

import argparse
import importlib.metadata
import importlib.util
import json
import os
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import Any, NamedTuple

__all__ = ["EXIT_CODES", "PROGRAMS", "build_parser", "main"]

SUCCEEDED, FAILED, USAGE, UNREACHABLE, CANCELLED, TIMED_OUT = 0, 1, 2, 3, 4, 5

EXIT_CODES = {
    SUCCEEDED: "success",
    FAILED: "a job failed, or the service refused a request (its problem is printed)",
    USAGE: "usage error: a bad option, a file that cannot be read or sent",
    UNREACHABLE: "the server could not be reached at --server / LACUNA_URL",
    CANCELLED: "the job was cancelled",
    TIMED_OUT: "--timeout ran out before the job ended",
}
"""What each exit status of ``lacuna`` means (the module docstring and README list them)."""

OUTPUTS = ("diagrams", "descriptors", "graph")
"""What a job's result can hold (the request's "output")."""

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


def _json_object(what: str) -> Any:
    def parse(text: str) -> dict[str, Any]:
        value = _json_option(text, what)
        if not isinstance(value, dict):
            raise argparse.ArgumentTypeError(f"{what}: expected a JSON object")
        return value

    return parse


def _outputs(text: str) -> list[str]:
    names = [name.strip() for name in text.split(",") if name.strip()]
    unknown = [name for name in names if name not in OUTPUTS]
    if unknown or not names:
        raise argparse.ArgumentTypeError(
            f"--output: {', '.join(unknown) or repr(text)} is not one of {', '.join(OUTPUTS)}"
        )
    return names


def _field_value(text: str) -> tuple[str, Any]:
    """``--set FIELD=JSON``: a dotted field of the request and its JSON value."""
    name, equals, value = text.partition("=")
    if not equals or not name or any(not part for part in name.split(".")):
        raise argparse.ArgumentTypeError(
            f"--set: expected FIELD=JSON, e.g. filtration.max_edge=0.5, not {text!r}"
        )
    try:
        return name, json.loads(value)
    except ValueError as error:
        raise argparse.ArgumentTypeError(f"--set {name}: not JSON ({error})") from None


def _max_dim(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"--max-dim: not an integer: {text!r}") from None
    if value < 0:
        raise argparse.ArgumentTypeError(f"--max-dim: must be 0 or more, not {value}")
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

    outputs = [name for names in args.output or [] for name in names]
    options = BatchOptions(
        input_type=args.input_type,
        filtration=args.filtration,
        features=args.features,
        spacing=args.spacing,
        units=args.units,
        columns=args.columns.split(",") if args.columns else None,
        label_column=args.label_column,
        label_property=args.label_property,
        skeletonize=args.skeletonize,
        output=list(dict.fromkeys(outputs)) or None,
        descriptors=args.descriptors,
        max_dim=args.max_dim,
        fields=tuple(args.set or ()),
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
        sys.stderr.write(f"lacuna submit: {error}\n")
        return FAILED if isinstance(error, LayoutMismatch) else USAGE
    finally:
        bar.close()
    failed = [job for job in jobs if job.result is None]
    summary = {
        "files": len(jobs),
        "succeeded": len(jobs) - len(failed),
        "failed": [
            {
                "file": str(job.path),
                "job_id": job.job_id,
                "status": job.status,
                "problem": job.problem,
            }
            for job in failed
        ],
        "jobs": [
            {
                "file": str(job.path),
                "job_id": job.job_id,
                "result": str(job.written) if job.written else None,
            }
            for job in jobs
        ],
    }
    lines = [f"{len(jobs) - len(failed)} of {len(jobs)} jobs succeeded"]
    lines += [
        f"  {job.path}: {job.status}: {(job.problem or {}).get('title')}: "
        f"{(job.problem or {}).get('detail')}"
        for job in failed
    ]
    _print(args, summary, "\n".join(lines))
    return _batch_exit([job.status for job in failed])


def _batch_exit(statuses: Sequence[str | None]) -> int:
    """The exit status of a batch whose unsuccessful jobs ended so: 1, 5, 4, the first
    that applies."""
    if any(status not in ("timeout", "cancelled") for status in statuses):
        return FAILED
    if "timeout" in statuses:
        return TIMED_OUT
    return CANCELLED if statuses else SUCCEEDED


def _status(args: argparse.Namespace) -> int:
    status = _client(args).status(args.job_id)
    text = status["status"]
    progress = status.get("progress")
    if progress and status["status"] in ("queued", "running"):  # an ended job's is history
        stage = f"{progress['stage']}: " if progress.get("stage") else ""
        text += f" ({stage}{progress['done']} of {progress['total']} done)"
    if status.get("problem"):
        text += f": {status['problem'].get('title')}: {status['problem'].get('detail')}"
    if status["status"] == "cancelled" and status.get("ended_at"):
        text += f" at {status['ended_at']}"
    _print(args, status, text)
    return {"failed": FAILED, "cancelled": CANCELLED}.get(status["status"], SUCCEEDED)


def _fetch(args: argparse.Namespace) -> int:
    from lacuna_client.client import LacunaError

    try:
        result = _client(args).result(args.job_id, args.timeout)
    except LacunaError as error:
        if error.job_status is None:
            raise
        return _ended_without_result(args, error)
    if args.out is None:
        sys.stdout.write(json.dumps(result) + "\n")
    else:
        Path(args.out).write_text(json.dumps(result) + "\n", encoding="utf-8")
    return 0


def _ended_without_result(args: argparse.Namespace, error: Any) -> int:
    """``lacuna fetch`` of a job that failed, was cancelled or outlived --timeout."""
    if args.json:
        document = {"job_id": args.job_id, "status": error.job_status, "problem": error.problem}
        sys.stdout.write(json.dumps(document) + "\n")
    if error.job_status == "cancelled":
        sys.stderr.write(f"lacuna fetch: job {args.job_id} was cancelled; it has no result\n")
        return CANCELLED
    if error.job_status == "timeout":
        sys.stderr.write(f"lacuna fetch: {error.detail} (--timeout)\n")
        return TIMED_OUT
    sys.stderr.write(f"lacuna fetch: job {args.job_id} failed: {error.title}: {error.detail}\n")
    return FAILED


def _cancel(args: argparse.Namespace) -> int:
    status = _client(args).cancel(args.job_id)
    _print(args, status, status["status"])
    return 0


class _Formatter(argparse.HelpFormatter):
    """Wraps descriptions, keeps indented lines (the table of exit codes) as they are."""

    def _fill_text(self, text: str, width: int, indent: str) -> str:
        fill = super()._fill_text
        return "\n".join(
            indent + line if line.startswith(" ") else fill(line, width, indent)
            for line in text.splitlines()
        )


def _exit_codes() -> str:
    return "exit status:\n" + "\n".join(f"  {code}  {text}" for code, text in EXIT_CODES.items())


class _Version(argparse.Action):
    """``--version``: the installed package's version, looked up only when asked."""

    def __init__(self, option_strings: Sequence[str], dest: str, **kwargs: Any) -> None:
        super().__init__(option_strings, dest, nargs=0, help="print the version and exit")

    def __call__(self, parser: argparse.ArgumentParser, *args: Any, **kwargs: Any) -> None:
        try:
            version = importlib.metadata.version("lacuna")
        except importlib.metadata.PackageNotFoundError:
            version = "unknown (not installed)"
        sys.stdout.write(f"lacuna {version}\n")
        parser.exit()


def _client_commands(commands: Any) -> None:
    """The submit, status, fetch and cancel parsers."""
    # The client has no settings library on purpose (it installs without pydantic): the two
    # variables it reads are the defaults of these options.
    url = os.environ.get("LACUNA_URL", DEFAULT_URL)
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument(
        "--server", default=url, metavar="URL", help=f"the lacuna server (LACUNA_URL; now {url})"
    )
    common.add_argument(
        "--api-key",
        default=os.environ.get("LACUNA_API_KEY"),
        metavar="KEY",
        help="API key of a shared server, sent as Authorization: Bearer (LACUNA_API_KEY)",
    )
    common.add_argument("--json", action="store_true", help="print JSON on stdout")
    common.add_argument(
        "--http-timeout",
        type=float,
        default=60.0,
        metavar="SECONDS",
        help="longest wait for one answer of the server (default 60)",
    )
    waiting = argparse.ArgumentParser(add_help=False)
    waiting.add_argument(
        "--timeout",
        type=float,
        default=None,
        metavar="SECONDS",
        help="give up waiting for a job after this long, exit 5 (default: no limit)",
    )
    shown = {"epilog": _exit_codes(), "formatter_class": _Formatter}

    submit = commands.add_parser(
        "submit",
        parents=[common, waiting],
        help="submit files as jobs, wait, write results and stacked vectors",
        description="Submit each file as a job, show progress, and write one result per file: "
        "<file>.result.json next to it (<file>.problem.json if its job failed), or, with "
        "--out DIR, into DIR in the same folder tree as the inputs. The feature vectors "
        "of all files are stacked into vectors.npy, vectors.csv and vectors.json (one row "
        "per file, in the order given; vectors.json names the file and result of each row).",
        **shown,
    )
    submit.add_argument(
        "files",
        nargs="+",
        metavar="FILE",
        help=".csv .npy .tif .tiff .png .graphml .geojson .json",
    )
    submit.add_argument(
        "--input-type",
        choices=["points", "labelled_points", "image", "mask", "graph"],
        help="what the files hold (default by extension: .csv points, or labelled_points "
        "with --label-column; .npy/.tif/.png image; .graphml/.json graph; .geojson "
        "labelled_points)",
    )
    submit.add_argument(
        "--filtration",
        type=_filtration,
        metavar="NAME|JSON",
        help='a name ("rips", "cubical", "distance", ...) or a JSON object / @file.json '
        "(default: rips for points, cubical for images, distance for masks; graphs have "
        "none by default)",
    )
    submit.add_argument(
        "--max-dim",
        type=_max_dim,
        metavar="K",
        help="highest homology dimension of the filtration (its max_dim)",
    )
    submit.add_argument(
        "--features",
        type=_features,
        metavar="JSON",
        help="feature spec(s) to vectorise the diagrams: a JSON file, @file or inline JSON",
    )
    submit.add_argument(
        "--output",
        type=_outputs,
        action="append",
        metavar="KIND[,KIND]",
        help="what each result holds: diagrams (default), descriptors, graph; repeat the "
        "option or separate with commas. descriptors and graph are for graphs and masks "
        "with --skeletonize",
    )
    submit.add_argument(
        "--descriptors",
        type=_json_object("--descriptors"),
        metavar="JSON",
        help="how to measure the network descriptors, e.g. '{\"direction\": [0, 1]}' "
        "(with --output descriptors; inline JSON or @file)",
    )
    submit.add_argument(
        "--spacing",
        type=_floats,
        metavar="S,S[,S]",
        help="physical pixel or voxel size per axis, e.g. 0.5,0.5",
    )
    submit.add_argument("--units", help="units of coordinates or spacing, e.g. um")
    submit.add_argument(
        "--columns",
        metavar="NAME,NAME[,NAME]",
        help="coordinate columns of .csv tables (default x,y[,z]; x,y for labelled points)",
    )
    submit.add_argument(
        "--label-column",
        metavar="NAME",
        help=".csv tables: the column holding each point's class; the files are then "
        "labelled points (uploaded as they are)",
    )
    submit.add_argument(
        "--label-property",
        metavar="NAME",
        default="class",
        help=".geojson files: the feature property holding each point's class (default class)",
    )
    submit.add_argument(
        "--skeletonize",
        action="store_true",
        help="masks: work on the skeleton graph (vessel centre lines)",
    )
    submit.add_argument(
        "--set",
        type=_field_value,
        action="append",
        metavar="FIELD=JSON",
        help="set any field of the request, after the options above, e.g. "
        "filtration.max_edge=0.5 or 'filtration.direction=[0, 1]' (repeatable)",
    )
    submit.add_argument(
        "--out",
        type=Path,
        default=None,
        metavar="DIR",
        help="directory for results and vectors.* (default: results next to each input, "
        "vectors.* in the current directory)",
    )
    submit.add_argument("--quiet", action="store_true", help="no progress bar")

    for name, what in (("status", "show a job's state"), ("cancel", "cancel a job")):
        command = commands.add_parser(
            name, parents=[common], help=what, description=what[0].upper() + what[1:] + ".", **shown
        )
        command.add_argument("job_id", metavar="JOB_ID", help="the job's id")
    fetch = commands.add_parser(
        "fetch",
        parents=[common, waiting],
        help="write a job's result (waits for it)",
        description="Wait for a job and write its result as JSON.",
        **shown,
    )
    fetch.add_argument("job_id", metavar="JOB_ID", help="the job's id")
    fetch.add_argument(
        "--out", default=None, metavar="FILE", help="file to write (default: stdout)"
    )


def build_parser() -> argparse.ArgumentParser:
    """Every command; the server's are listed here and parse their own options."""
    parser = argparse.ArgumentParser(
        prog="lacuna",
        description="Persistent homology of point sets, images, masks and graphs, computed by "
        "a lacuna server: submit files, follow jobs, fetch results; and the server's own "
        "programs.",
        epilog=_exit_codes(),
        formatter_class=_Formatter,
    )
    parser.add_argument("--version", action=_Version)
    commands = parser.add_subparsers(dest="command", required=True)
    for name, program in PROGRAMS.items():
        commands.add_parser(name, help=f"{program.help} (see lacuna {name} --help)", add_help=False)
    _client_commands(commands)
    return parser


def _unreachable(command: str, error: Any) -> int:
    """The one line for a server that does not answer, exit 3."""
    url, reason = error.problem.get("url"), error.problem.get("reason")
    sys.stderr.write(
        f"lacuna {command}: cannot reach the lacuna server at {url} ({reason}); is it "
        "running? set --server or LACUNA_URL\n"
    )
    return UNREACHABLE


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
        if error.unreachable:
            return _unreachable(args.command, error)
        sys.stderr.write(f"lacuna {args.command}: {error}\n")
        return FAILED


if __name__ == "__main__":
    sys.exit(main())
