"""``make fuzz``: schemathesis against the OpenAPI document a real stack serves.

The stack is ``lacuna serve`` on a free port of 127.0.0.1 with its own embedded Redis (never
another: ``LACUNA_REDIS_URL`` is dropped from its environment) and one real worker, so the
jobs the fuzzer submits really run and the document's links (POST /v1/jobs and
POST /v1/distances to the job's status, result, picture and cancel; POST /v1/feature-specs to
the spec) chain real ids in the stateful phase. Checks: no 5xx (``not_a_server_error``), and
conformance of each answer's status code, content type and body to the document. On top, any
answer carrying an ``internal-error`` problem (a failed job's status, say) is a finding.

Bounded: the stack (with its Redis and worker, which inherit the limit) and the fuzzer each
run under RLIMIT_DATA (``ulimit -d``), so a runaway allocation fails in that process instead
of starving the shared machine, and the fuzzer under a wall-clock limit besides its own time
budget. Peak memory is the largest resident set the stack's processes reached together,
sampled every 0.2 s, and the fuzzer's own.

    python -m tests.fuzz.run       # make fuzz: all phases for 240 s (thousands of requests)
    python -m tests.fuzz.run --max-examples 10 --phases examples,fuzzing,stateful \
        --no-max-time --min-requests 100                    # the short form of make test

``--document FILE`` fuzzes another document than the one served (against the same stack) and
``--only OPERATION_ID`` one operation: tests/fuzz/test_fuzz.py shows with both that an answer
the document leaves out is reported.

Exit code 0 when schemathesis found nothing, no answer held an internal error, at least
``--min-requests`` requests were sent and some jobs' results came back; 1 otherwise.
"""

import argparse
import base64
import collections
import json
import os
import resource
import signal
import subprocess
import sys
import tempfile
import threading
import time
import uuid
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import asdict, dataclass, field
from pathlib import Path

from tests.support.ports import free_port
from tests.support.processes import descendants
from tests.support.stack import stop, wait_ready

CHECKS = (
    "not_a_server_error",
    "status_code_conformance",
    "content_type_conformance",
    "response_schema_conformance",
)
PHASES = ("examples", "coverage", "fuzzing", "stateful")
SCHEMATHESIS = str(Path(sys.executable).with_name("schemathesis"))
INTERNAL_ERROR = b"urn:lacuna:problem:internal-error"
"""The problem type of an unexpected error (workers/spec/problems.py PROBLEM_KINDS)."""


def _data_limit(megabytes: int) -> Callable[[], None]:
    """A preexec function capping the child's data segment (``ulimit -d``) at ``megabytes``."""

    def cap() -> None:
        limit = megabytes * 1024 * 1024
        resource.setrlimit(resource.RLIMIT_DATA, (limit, limit))

    return cap


def _rss_kib(pid: int) -> int:
    try:
        for line in Path(f"/proc/{pid}/status").read_text().splitlines():
            if line.startswith("VmRSS:"):
                return int(line.split()[1])
    except OSError:  # it ended while we looked
        pass
    return 0


class PeakMemory:
    """The largest total resident set of a process and its descendants, sampled in a thread."""

    def __init__(self, pid: int, interval: float = 0.2) -> None:
        self.peak_kib = 0
        self._pid = pid
        self._interval = interval
        self._done = threading.Event()
        self._thread = threading.Thread(target=self._sample, daemon=True)
        self._thread.start()

    def _sample(self) -> None:
        while not self._done.wait(self._interval):
            tree = {self._pid, *descendants(self._pid)}
            self.peak_kib = max(self.peak_kib, sum(_rss_kib(pid) for pid in tree))

    def stop(self) -> int:
        self._done.set()
        self._thread.join()
        return self.peak_kib


@contextmanager
def serving(memory_mb: int, max_wait_s: int) -> Iterator[tuple[str, subprocess.Popen[bytes]]]:
    """``lacuna serve`` with its embedded Redis and one worker; its base URL and process."""
    port = free_port()
    env = {k: v for k, v in os.environ.items() if k != "LACUNA_REDIS_URL"}
    env.update(LACUNA_QUEUE=f"fuzz-{uuid.uuid4().hex[:12]}", LACUNA_MAX_WAIT_S=str(max_wait_s))
    command = [sys.executable, "-m", "service", "serve", "--host", "127.0.0.1"]
    # A data directory of its own: never the user's state folder (whose lock would refuse the
    # user's own `lacuna serve`, and whose append-only file every run would grow and reload).
    with tempfile.TemporaryDirectory(prefix="lacuna-fuzz-data-") as data_dir:
        process = subprocess.Popen(
            [*command, "--port", str(port), "--local-workers", "1", "--http-workers", "1"]
            + ["--data-dir", data_dir],
            env=env,
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
            preexec_fn=_data_limit(memory_mb),
        )
        base = f"http://127.0.0.1:{port}"
        try:
            wait_ready(base, workers=1)
            yield base, process
        finally:
            stop(process, signal.SIGTERM)


@dataclass
class Summary:
    """What one fuzz run did and found."""

    report_dir: str = ""
    requests: int = 0
    stateful_requests: int = 0
    exit_code: int = 0
    failures: list[str] = field(default_factory=list)
    internal_errors: list[str] = field(default_factory=list)
    statuses: dict[str, int] = field(default_factory=dict)
    duration_s: float = 0.0
    stack_peak_mib: float = 0.0
    fuzzer_peak_mib: float = 0.0
    problems: list[str] = field(default_factory=list)

    def results_fetched(self) -> int:
        """How many job results came back (GET .../result answered 200)."""
        return sum(n for key, n in self.statuses.items() if key.endswith("/result 200"))


def _operation(method: str, uri: str) -> str:
    """``GET /v1/jobs/{job_id}/result`` for a request to a job's result, and so on."""
    path = "/" + uri.split("//", 1)[-1].split("/", 1)[-1].split("?")[0]
    parts = path.split("/")
    if len(parts) > 3 and parts[2] in ("jobs", "feature-specs"):
        parts[3] = "{id}"
    return f"{method} {'/'.join(parts)}"


def read_reports(report_dir: Path, summary: Summary) -> None:
    """Requests sent, answers by operation and status, and findings, from the reports."""
    statuses: collections.Counter[str] = collections.Counter()
    for path in report_dir.glob("ndjson-*.ndjson"):
        with path.open(encoding="utf-8") as events:
            for line in events:
                event = json.loads(line)
                finished = event.get("ScenarioFinished")
                if finished is None:
                    continue
                interactions = (finished.get("recorder") or {}).get("interactions") or {}
                for interaction in interactions.values():
                    summary.requests += 1
                    summary.stateful_requests += finished["phase"] == "stateful"
                    request, response = interaction["request"], interaction.get("response")
                    if response is None:
                        continue
                    operation = _operation(request["method"], request["uri"])
                    statuses[f"{operation} {response['status_code']}"] += 1
                    body = base64.b64decode((response.get("content") or {}).get("$base64", ""))
                    if INTERNAL_ERROR in body:
                        summary.internal_errors.append(f"{operation}: {body[:300]!r}")
    summary.statuses = dict(sorted(statuses.items()))
    for path in report_dir.glob("json-*.json"):
        report = json.loads(path.read_text(encoding="utf-8"))
        for failure in report.get("failures", []):
            summary.failures.append(json.dumps(failure))
        for error in report.get("errors", []):
            summary.failures.append("error: " + json.dumps(error)[:2000])


def fuzz(args: argparse.Namespace) -> Summary:
    """Start the stack, run schemathesis against it, stop the stack; what happened."""
    summary = Summary()
    started = time.monotonic()
    report_dir = Path(args.report_dir or tempfile.mkdtemp(prefix="lacuna-fuzz-")).resolve()
    report_dir.mkdir(parents=True, exist_ok=True)
    summary.report_dir = str(report_dir)
    with serving(args.stack_memory_mb, args.max_wait_s) as (base, stack):
        stack_memory = PeakMemory(stack.pid)
        location = [f"{base}/v1/openapi.json"]
        if args.document:  # another document than the one served, against the same stack
            location = [str(Path(args.document).resolve()), "--url", base]
        command = [
            SCHEMATHESIS,
            "run",
            *location,
            "--checks",
            ",".join(CHECKS),
            "--phases",
            args.phases,
            "--max-examples",
            str(args.max_examples),
            "--seed",
            str(args.seed),
            "--workers",
            "1",
            "--request-timeout",
            str(args.max_wait_s + 30),
            "--report",
            "json,ndjson",
            "--report-dir",
            str(report_dir),
            "--generation-database",
            "none",
            "--no-color",
        ]
        if args.max_time:
            command += ["--max-time", str(args.max_time)]
        for operation in args.only:
            command += ["--include-operation-id", operation]
        fuzzer = subprocess.Popen(
            command,
            stdout=None if args.verbose else subprocess.DEVNULL,
            preexec_fn=_data_limit(args.fuzzer_memory_mb),
            start_new_session=True,
            cwd=report_dir,  # its own cache (.schemathesis/) goes with the reports
        )
        fuzzer_memory = PeakMemory(fuzzer.pid)
        try:
            summary.exit_code = fuzzer.wait(args.wall_clock)
        except subprocess.TimeoutExpired:
            os.killpg(fuzzer.pid, signal.SIGKILL)  # its own session: only its processes
            fuzzer.wait()
            summary.exit_code = -1
            summary.problems.append(f"the fuzzer ran past the wall-clock limit {args.wall_clock}")
        summary.fuzzer_peak_mib = fuzzer_memory.stop() / 1024
        summary.stack_peak_mib = stack_memory.stop() / 1024
        if stack.poll() is not None:
            summary.problems.append(f"the stack exited during the run (code {stack.returncode})")
    summary.duration_s = time.monotonic() - started
    read_reports(report_dir, summary)
    if summary.exit_code != 0:
        summary.problems.append(f"schemathesis exited with {summary.exit_code}")
    if summary.failures or summary.internal_errors:
        summary.problems.append(
            f"{len(summary.failures)} schemathesis findings, {len(summary.internal_errors)} "
            "answers with an internal error"
        )
    if summary.requests < args.min_requests:
        summary.problems.append(f"{summary.requests} requests, below {args.min_requests}")
    if summary.stateful_requests == 0:
        summary.problems.append("the stateful phase sent no request")
    if summary.results_fetched() == 0:
        summary.problems.append("no job result came back: the jobs did not run")
    return summary


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="python -m tests.fuzz.run", description=__doc__)
    parser.add_argument("--max-examples", type=int, default=40, help="per operation and phase")
    parser.add_argument("--phases", default=",".join(PHASES), help="schemathesis's phases")
    parser.add_argument("--max-time", type=int, default=240, help="schemathesis's budget, s")
    parser.add_argument("--no-max-time", dest="max_time", action="store_const", const=0)
    parser.add_argument("--wall-clock", type=int, default=600, help="kill the fuzzer after, s")
    parser.add_argument("--min-requests", type=int, default=1000)
    parser.add_argument("--seed", type=int, default=15)
    parser.add_argument("--max-wait-s", type=int, default=10, help="the stack's wait cap")
    parser.add_argument("--stack-memory-mb", type=int, default=4096, help="RLIMIT_DATA")
    parser.add_argument("--fuzzer-memory-mb", type=int, default=2048, help="RLIMIT_DATA")
    parser.add_argument("--document", default=None, help="fuzz this document file instead")
    parser.add_argument("--only", action="append", default=[], help="an operationId to fuzz")
    parser.add_argument("--report-dir", default=None, help="keep the reports here")
    parser.add_argument("--summary", default=None, help="write the summary as JSON here")
    parser.add_argument("--verbose", action="store_true", help="show schemathesis's output")
    return parser


def main(argv: list[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    summary = fuzz(args)
    if args.summary:
        Path(args.summary).write_text(json.dumps(asdict(summary), indent=2), encoding="utf-8")
    print(
        f"{summary.requests} requests ({summary.stateful_requests} stateful) in "
        f"{summary.duration_s:.0f} s; peak memory: stack {summary.stack_peak_mib:.0f} MiB, "
        f"fuzzer {summary.fuzzer_peak_mib:.0f} MiB; {summary.results_fetched()} job results "
        f"fetched; reports in {summary.report_dir}"
    )
    unlisted = 0  # 405s and OPTIONS: methods the document does not list, one line for all
    for key, count in summary.statuses.items():
        if key.endswith(" 405") or key.startswith("OPTIONS "):
            unlisted += count
        else:
            print(f"  {count:6d}  {key}")
    print(f"  {unlisted:6d}  answers to methods the document does not list (405, OPTIONS)")
    for finding in summary.failures + summary.internal_errors:
        print("FINDING:", finding)
    for problem in summary.problems:
        print("FAILED:", problem)
    return 1 if summary.problems else 0


if __name__ == "__main__":
    sys.exit(main())
