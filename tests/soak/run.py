"""``make soak``: a bounded soak of a real ``lacuna serve`` while its children are killed.

A stack of its own (an embedded Redis on a unix socket in a fresh data directory, never
6379; the API on a free port of 127.0.0.1) takes ``--jobs`` mixed jobs (Rips on point sets
and cell layouts, images, masks, capillary graphs, distance matrices; bodies from the
project's generators) from a few client threads. Spread over the run, by the share of jobs
submitted: five worker SIGKILLs, one SIGKILL of the embedded redis-server and one of the
gunicorn master; the supervisor must bring each back. Every submission carries an
Idempotency-Key, and one that hits a connection error or a 503 is sent again with the same
key, so a submission during an outage is neither lost nor doubled.

At the end it prints submitted / succeeded / failed (by reason) / lost / stuck / doubled, the
restart times it measured, and exits 1 unless nothing was lost or stuck, every submission was
accepted and every result that had succeeded before the Redis kill reads back the same
after it. Bounded: RLIMIT_AS on the stack's processes and on this one, a total time limit.

    python -m tests.soak.run --jobs 150     # a short one while others share the machine
"""

import argparse
import hashlib
import itertools
import json
import os
import random
import re
import resource
import shutil
import signal
import sys
import tempfile
import threading
import time
import uuid
from collections import Counter
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from types import FrameType
from typing import Any

import numpy as np
import requests
from redis import Redis
from rq import Queue, Worker
from rq.intermediate_queue import IntermediateQueue
from rq.registry import StartedJobRegistry

from tests.support.bodies import rips_job
from tests.support.ports import free_port
from tests.support.stack import wait_ready
from tests.support.supervised import ServedStack
from tests.support.synthetic import cell_blobs, noisy_circle, ring_mask, smooth_field, uniform
from workers.scenario.capillaries import capillary_network, capillary_request
from workers.scenario.cells import cell_layout

Body = dict[str, Any]

WORKER_KILLS = (0.10, 0.25, 0.40, 0.65, 0.85)
"""When the worker SIGKILLs come, as shares of the jobs submitted."""

REDIS_KILL = 0.50
API_KILL = 0.75

IN_FLIGHT_S = 60.0

GATE_S = 2.0
"""Longest a client holds a submission back because too many jobs are in flight."""

_RETRIED = {502, 503, 504}
_ENDED = {"succeeded", "failed", "cancelled"}


# --- the workload ------------------------------------------------------------------------


def _rounded(array: np.ndarray, decimals: int = 4) -> Any:
    return np.round(array, decimals).tolist()


def _random_diagram(rng: np.random.Generator, pairs: int) -> list[list[float]]:
    births = rng.uniform(0, 1, pairs)
    lives = rng.uniform(0.01, 1, pairs)
    return [[round(b, 4), round(b + d, 4)] for b, d in zip(births, lives, strict=True)]


def workload(count: int, seed: int) -> list[tuple[str, str, Body]]:
    """``count`` (kind, path, body) triples, mixed: points 40 %, images 20 %, masks 10 %,
    graphs 20 %, distances 10 %, each drawn from a small pool of generated bodies."""
    rng = np.random.default_rng(seed)
    pools: dict[str, list[tuple[str, Body]]] = {
        "points": [
            ("/v1/jobs", rips_job(_rounded(noisy_circle(200, s)), max_dim=1)) for s in range(8)
        ]
        + [("/v1/jobs", rips_job(_rounded(uniform(70, 3, s)), max_dim=2)) for s in range(4)]
        + [
            ("/v1/jobs", rips_job(_rounded(cell_layout("mixed", s, count=300)[0], 2), max_dim=1))
            for s in range(4)
        ],
        "image": [
            (
                "/v1/jobs",
                {
                    "input": {"type": "image", "values": _rounded(smooth_field((96, 96), 2.0, s))},
                    "filtration": {"type": "cubical"},
                },
            )
            for s in range(12)
        ],
        "mask": [
            (
                "/v1/jobs",
                {
                    "input": {"type": "mask", "values": mask.astype(int).tolist()},
                    "filtration": {"type": "distance"},
                },
            )
            for mask in [ring_mask((96, 96), (48.0, 48.0), 12.0 + 3 * s, 34.0) for s in range(4)]
            + [cell_blobs((96, 96), 12, 6.0, s) for s in range(4)]
        ],
        "graph": [
            (
                "/v1/jobs",
                capillary_request(
                    capillary_network(
                        branch_probability=0.05,
                        fusion_probability=0.3,
                        seed=s,
                        size=(600.0, 600.0),
                        sprouts=6,
                        max_steps=120,
                    )
                ),
            )
            for s in range(12)
        ],
        "distances": [
            (
                "/v1/distances",
                {
                    "metric": metric,
                    "diagrams": [_random_diagram(rng, 40) for _ in range(8)],
                },
            )
            for metric in ("bottleneck", "wasserstein", "sliced_wasserstein")
            for _ in range(4)
        ],
    }
    kinds = rng.choice(
        ["points", "image", "mask", "graph", "distances"], size=count, p=[0.4, 0.2, 0.1, 0.2, 0.1]
    )
    chosen = []
    for kind in kinds.tolist():
        path, body = pools[kind][int(rng.integers(len(pools[kind])))]
        chosen.append((kind, path, body))
    return chosen


# --- what happened to each job -----------------------------------------------------------


def digest(value: Any) -> str:
    return hashlib.sha256(json.dumps(value, sort_keys=True).encode()).hexdigest()


@dataclass
class Job:
    kind: str
    key: str
    location: str | None = None
    state: str = "unsent"  # unsent, pending, succeeded, failed, lost, not accepted
    reason: str = ""
    result: str | None = None  # digest of the result once read
    submit_tries: int = 0
    accepted_at: float = 0.0
    last_status: str = ""  # what the last look at a pending job said


@dataclass
class Ledger:
    jobs: list[Job]
    lock: threading.Lock = field(default_factory=threading.Lock)
    accepted: int = 0
    retried: Counter[str] = field(default_factory=Counter)  # why submissions were sent again

    def pending(self) -> list[Job]:
        with self.lock:
            return [job for job in self.jobs if job.state == "pending"]

    def in_flight(self, now: float) -> int:
        """Pending jobs accepted within IN_FLIGHT_S: the clients wait while there are too
        many (a job stuck behind a dead worker stops counting after a while)."""
        with self.lock:
            return sum(
                job.state == "pending" and now - job.accepted_at < IN_FLIGHT_S for job in self.jobs
            )


class Soak:
    def __init__(self, stack: ServedStack, args: argparse.Namespace) -> None:
        self.stack = stack
        self.base = stack.base
        self.args = args
        self.deadline = time.monotonic() + args.time_limit
        bodies = workload(args.jobs, args.seed)
        self.bodies = bodies
        self.ledger = Ledger([Job(kind, str(uuid.uuid4())) for kind, _, _ in bodies])
        self.next_index = itertools.count()
        self.events: list[str] = []
        self.measured: dict[str, list[float]] = {"worker": [], "redis": [], "api": []}
        self.before_redis_kill: dict[str, str] = {}  # location -> digest
        self.aof_at_kill = 0  # bytes of the append-only file when Redis was killed
        self.halt = threading.Event()

    def note(self, text: str) -> None:
        stamp = time.strftime("%H:%M:%S", time.gmtime())
        line = f"{stamp} soak: {text}"
        self.events.append(line)
        print(line, flush=True)

    # --- clients ---

    def submit_all(self) -> None:
        session = requests.Session()
        while not self.halt.is_set():
            index = next(self.next_index)
            if index >= len(self.bodies) or time.monotonic() > self.deadline:
                return
            # Closed loop: as many jobs in flight as the workers can take, so the run (and
            # the faults spread over it) lasts as long as the work does; but a client waits at
            # most GATE_S, so submissions go on while the API is down (and are sent again).
            gate = time.monotonic() + GATE_S
            while self.ledger.in_flight(time.monotonic()) >= self.args.in_flight:
                if self.halt.wait(0.05) or time.monotonic() > self.deadline:
                    return
                if time.monotonic() > gate:
                    break
            self._submit(session, index)

    def _submit(self, session: requests.Session, index: int) -> None:
        kind, path, body = self.bodies[index]
        job = self.ledger.jobs[index]
        delay = 0.2
        while time.monotonic() < self.deadline:
            job.submit_tries += 1
            try:
                answer = session.post(
                    self.base + path,
                    json=body,
                    headers={"Idempotency-Key": job.key},
                    timeout=(5, 90),
                )
                why = str(answer.status_code)
            except requests.RequestException as error:
                answer, why = None, type(error).__name__
            if answer is None or answer.status_code in _RETRIED:
                with self.ledger.lock:
                    self.ledger.retried[why] += 1
                time.sleep(delay)
                delay = min(delay * 2, 5.0)
                continue
            with self.ledger.lock:
                if answer.status_code in (200, 202):
                    job.location = answer.headers["Location"]
                    job.state, job.accepted_at = "pending", time.monotonic()
                    self.ledger.accepted += 1
                    if answer.status_code == 200:
                        job.state, job.result = "succeeded", digest(answer.json())
                else:
                    job.state = "failed"
                    job.reason = f"refused {answer.status_code} {_problem_name(answer)}"
                    self.ledger.accepted += 1
            return
        with self.ledger.lock:
            job.state, job.reason = "not accepted", "no answer before the time limit"

    def poll_all(self) -> None:
        session = requests.Session()
        while not self.halt.is_set():
            for job in self.ledger.pending():
                if self.halt.is_set():
                    return
                self._poll(session, job)
            self.halt.wait(0.5)

    def _poll(self, session: requests.Session, job: Job) -> None:
        assert job.location is not None
        try:
            answer = session.get(self.base + job.location, timeout=10)
            if answer.status_code == 404:
                with self.ledger.lock:
                    job.state, job.reason = "lost", "404: the job is gone"
                return
            if answer.status_code != 200:
                return  # 503 during an outage: look again later
            status = answer.json()
            job.last_status = status["status"]
            if status["status"] == "succeeded":
                result = session.get(self.base + job.location + "/result", timeout=10)
                if result.status_code == 200:
                    with self.ledger.lock:
                        job.state, job.result = "succeeded", digest(result.json())
            elif status["status"] in _ENDED:
                problem = status.get("problem") or {}
                name = _kind_of(str(problem.get("type", status["status"])))
                with self.ledger.lock:
                    job.state, job.reason = "failed", f"{name}: {problem.get('title', '')}"
        except (requests.RequestException, ValueError):
            return

    # --- faults ---

    def share_submitted(self) -> float:
        with self.ledger.lock:
            return self.ledger.accepted / len(self.ledger.jobs)

    def chaos(self) -> None:
        plan: list[tuple[float, str]] = sorted(
            [(share, "worker") for share in WORKER_KILLS]
            + [(REDIS_KILL, "redis"), (API_KILL, "api")]
        )
        for share, what in plan:
            while self.share_submitted() < share:
                if self.halt.wait(0.1) or time.monotonic() > self.deadline:
                    return
            {"worker": self.kill_worker, "redis": self.kill_redis, "api": self.kill_api}[what]()

    def _workers(self) -> set[str]:
        try:
            connection = Redis.from_url(self.stack.redis_url, socket_timeout=2)
            return {worker.name for worker in Worker.all(connection=connection)}
        except Exception:  # noqa: BLE001 (Redis may be down right now; ask again)
            return set()

    def _wait(self, condition: Callable[[], bool], seconds: float = 120) -> float | None:
        """Seconds until ``condition()``; None if it did not hold within ``seconds``."""
        start = time.monotonic()
        while time.monotonic() - start < seconds and not self.halt.is_set():
            if condition():
                return time.monotonic() - start
            time.sleep(0.05)
        return None

    def kill_worker(self) -> None:
        before = self._workers()
        pid = random.choice(self.stack.children("worker"))
        os.kill(pid, signal.SIGKILL)
        took = self._wait(lambda: bool(self._workers() - before))
        self.note(f"worker (pid {pid}) SIGKILLed; a new worker registered after {_seconds(took)}")
        if took is not None:
            self.measured["worker"].append(took)

    def kill_redis(self) -> None:
        with self.ledger.lock:
            done = {j.location: j.result for j in self.ledger.jobs if j.state == "succeeded"}
        self.before_redis_kill = {k: v for k, v in done.items() if k and v}
        aof = self.stack.data_dir / "appendonly.aof"
        size = aof.stat().st_size if aof.exists() else 0
        self.aof_at_kill = size
        pid = self.stack.kill("redis")
        probe = next(iter(self.before_redis_kill), None)

        def readable() -> bool:
            if probe is None:
                return self._workers() != set()
            try:
                return requests.get(self.base + probe + "/result", timeout=2).status_code == 200
            except requests.RequestException:
                return False

        took = self._wait(readable)
        self.note(
            f"redis-server (pid {pid}) SIGKILLed with {len(self.before_redis_kill)} results "
            f"and a {size / 1e6:.1f} MB AOF; a result read back through the API after "
            + _seconds(took)
        )
        if took is not None:
            self.measured["redis"].append(took)

    def kill_api(self) -> None:
        old = set(self.stack.children("http"))
        pid = self.stack.kill("http")

        def answering() -> bool:
            masters = set(self.stack.children("http"))
            if not masters or masters & old:
                return False
            try:
                return requests.get(self.base + "/healthz", timeout=1).status_code == 200
            except requests.RequestException:
                return False

        took = self._wait(answering)
        self.note(
            f"gunicorn master (pid {pid}) SIGKILLed; a new one answered after {_seconds(took)}"
        )
        if took is not None:
            self.measured["api"].append(took)

    # --- the end ---

    def drain(self, seconds: float) -> None:
        end = min(self.deadline, time.monotonic() + seconds)
        while self.ledger.pending() and time.monotonic() < end:
            time.sleep(0.5)

    def reread(self, results: dict[str, str]) -> tuple[int, int]:
        """(readable and equal, total) of ``results`` (job location -> digest)."""
        same = 0
        session = requests.Session()
        for location, expected in results.items():
            try:
                answer = session.get(self.base + location + "/result", timeout=10)
            except requests.RequestException:
                continue
            same += answer.status_code == 200 and digest(answer.json()) == expected
        return same, len(results)

    def where_stuck(self) -> Counter[str]:
        """Where each stuck job is in RQ's bookkeeping: on the queue, in the intermediate queue
        (taken by a worker that did not get to start it), in the started registry (running
        on a worker, alive or not) or nowhere."""
        connection = Redis.from_url(self.stack.redis_url)
        queue = Queue(self.args.queue, connection=connection)
        places = {
            "on the queue": set(queue.get_job_ids()),
            "in the intermediate queue": set(
                IntermediateQueue(queue.key, connection=connection).get_job_ids()
            ),
            "in the started registry": set(StartedJobRegistry(queue=queue).get_job_ids()),
        }
        found: Counter[str] = Counter()
        for job in self.ledger.pending():
            assert job.location is not None
            job_id = job.location.rsplit("/", 1)[-1]
            found[next((p for p, ids in places.items() if job_id in ids), "nowhere")] += 1
        return found

    def doubled(self) -> Counter[str]:
        """Jobs in Redis that none of our submissions was answered with (a retried submission
        that made a second job), by their description."""
        ours = {j.location.rsplit("/", 1)[-1] for j in self.ledger.jobs if j.location}
        connection = Redis.from_url(self.stack.redis_url)
        found = set()
        for key in connection.scan_iter(match="rq:job:*", count=1000):
            name = key.decode()[len("rq:job:") :]
            if ":" not in name:
                found.add(name)
        described: Counter[str] = Counter()
        for name in found - ours:
            raw = connection.hget(f"rq:job:{name}", "description")
            described[raw.decode() if isinstance(raw, bytes) else str(raw)] += 1
        return described


def _kind_of(problem_type: str) -> str:
    """The last word of a problem type, a URL or a URN ("...:worker-lost")."""
    return re.split(r"[/:]", problem_type)[-1]


def _seconds(took: float | None) -> str:
    return "never (within 120 s)" if took is None else f"{took:.2f} s"


def _problem_name(answer: requests.Response) -> str:
    try:
        return _kind_of(str(answer.json().get("type", "")))
    except ValueError:
        return ""


def _cap_memory(megabytes: int) -> Callable[[], None]:
    """Set RLIMIT_AS's soft limit (a process's own address space; its children inherit it),
    keeping the hard one so the stack, started from here, can be given its own."""
    limit = megabytes * 1024 * 1024

    def apply() -> None:
        hard = resource.getrlimit(resource.RLIMIT_AS)[1]
        resource.setrlimit(resource.RLIMIT_AS, (limit, hard))

    return apply


def parse(argv: list[str] | None) -> argparse.Namespace:
    parser = argparse.ArgumentParser(prog="python -m tests.soak.run", description=__doc__)
    parser.add_argument("--jobs", type=int, default=1000, help="jobs to submit (default 1000)")
    parser.add_argument("--clients", type=int, default=4, help="submitting threads")
    parser.add_argument("--workers", type=int, default=2, help="local workers of the stack")
    parser.add_argument(
        "--in-flight", type=int, default=6, help="most unfinished jobs at a time (default 6)"
    )
    parser.add_argument(
        "--time-limit", type=float, default=600, help="seconds for the whole run (default 600)"
    )
    parser.add_argument(
        "--stack-memory-mb", type=int, default=4096, help="RLIMIT_AS of each stack process"
    )
    parser.add_argument(
        "--driver-memory-mb", type=int, default=3072, help="RLIMIT_AS of this process"
    )
    parser.add_argument("--seed", type=int, default=2026)
    parser.add_argument("--queue", default="soak", help="the stack's queue (LACUNA_QUEUE)")
    parser.add_argument("--keep", action="store_true", help="keep the data directory")
    return parser.parse_args(argv)


def _row(name: str, value: object) -> str:
    return f"| {name:<44} | {value!s:>10} |"


def report(
    soak: Soak,
    reread: tuple[int, int],
    at_end: tuple[int, int],
    doubled: Counter[str],
    seconds: float,
) -> bool:
    jobs = soak.ledger.jobs
    states = Counter(job.state for job in jobs)
    reasons = Counter(job.reason for job in jobs if job.state == "failed")
    stuck = states["pending"]
    print()
    print(_row("what", "count"))
    print(f"|{'-' * 46}|{'-' * 12}|")
    print(_row("jobs planned", len(jobs)))
    print(_row("submitted (accepted by the API)", soak.ledger.accepted))
    print(_row("  submissions sent again, same key", soak.ledger.retried.total()))
    for why, count in sorted(soak.ledger.retried.items()):
        print(_row(f"    after {why}", count))
    not_accepted = states["not accepted"] + states["unsent"]
    print(_row("not accepted (none before the time limit)", not_accepted))
    print(_row("succeeded", states["succeeded"]))
    print(_row("failed", states["failed"]))
    for reason, count in sorted(reasons.items()):
        print(_row(f"  {reason[:42]}", count))
    print(_row("lost (accepted, then gone)", states["lost"]))
    print(_row("stuck (unfinished at the end)", stuck))
    last = Counter(job.last_status or "never seen" for job in jobs if job.state == "pending")
    for status, count in sorted(last.items()):
        print(_row(f"  last seen {status}", count))
    for place, count in sorted(soak.where_stuck().items()):
        print(_row(f"  {place}", count))
    print(_row("doubled (a second job for one submission)", doubled.total()))
    for description, count in sorted(doubled.items()):
        print(_row(f"  {description[:42]}", count))
    print(_row("results from before the Redis kill, same", f"{reread[0]}/{reread[1]}"))
    print(_row("  AOF size at the kill (MB)", f"{soak.aof_at_kill / 1e6:.1f}"))
    print(_row("every succeeded result, read at the end", f"{at_end[0]}/{at_end[1]}"))
    by_kind = Counter(job.kind for job in jobs if job.state == "succeeded")
    print(_row("succeeded by kind", ", ".join(f"{k} {v}" for k, v in sorted(by_kind.items()))))
    for what, times in soak.measured.items():
        shown = ", ".join(f"{t:.2f}" for t in times) or "none measured"
        print(_row(f"{what} restart (s)", shown))
    print(_row("wall time (s)", f"{seconds:.0f}"))
    print()
    return (
        states["lost"] == 0
        and stuck == 0
        and not_accepted == 0
        and reread[0] == reread[1]
        and at_end[0] == at_end[1]
        and len(soak.measured["worker"]) == len(WORKER_KILLS)
        and len(soak.measured["redis"]) == 1
        and len(soak.measured["api"]) == 1
    )


def main(argv: list[str] | None = None) -> int:
    args = parse(argv)
    _cap_memory(args.driver_memory_mb)()
    folder = Path(tempfile.mkdtemp(prefix="lacuna-soak-"))

    def out_of_time(signum: int, frame: FrameType | None) -> None:
        raise TimeoutError("the soak ran past its time limit")

    # A backstop behind the deadlines the loops check: a hang still ends, the stack stopped.
    signal.signal(signal.SIGALRM, out_of_time)
    signal.alarm(int(args.time_limit) + 120)
    ok = False
    try:
        with open(folder / "stack.log", "w") as log:
            stack = ServedStack(
                folder / "data",
                free_port(),
                workers=args.workers,
                env={"LACUNA_QUEUE": args.queue},
                preexec=_cap_memory(args.stack_memory_mb),
                log=log,
            )
            soak = Soak(stack, args)
            try:
                ok = _run(soak, log.name)
            finally:
                soak.halt.set()
                left = stack.stop(signal.SIGTERM)
            if left:
                print(f"processes left after the stack stopped: {sorted(left)}", file=sys.stderr)
                ok = False
    finally:
        signal.alarm(0)
        if args.keep:
            print(f"kept {folder}")
        else:
            shutil.rmtree(folder, ignore_errors=True)
    print("soak passed" if ok else "soak FAILED")
    return 0 if ok else 1


def _run(soak: Soak, log_name: str) -> bool:
    """Submit, kill, drain and count; True if the soak passed."""
    started = time.monotonic()
    stack, args = soak.stack, soak.args
    wait_ready(stack.base, workers=args.workers, seconds=120)
    soak.note(f"stack up at {stack.base}, data in {stack.data_dir}, log {log_name}")
    threads = [threading.Thread(target=soak.submit_all) for _ in range(args.clients)]
    threads += [threading.Thread(target=soak.poll_all), threading.Thread(target=soak.chaos)]
    for thread in threads:
        thread.start()
    for thread in threads[: args.clients]:
        thread.join()
    soak.note(f"all submitted after {time.monotonic() - started:.0f} s; draining")
    soak.drain(120)
    threads[-1].join(max(0.0, soak.deadline - time.monotonic()))  # chaos ends its plan
    soak.halt.set()
    for thread in threads:
        thread.join(30)
    # Look once more at what seemed lost: a 404 must hold with everything up.
    for job in soak.ledger.jobs:
        if job.state == "lost":
            job.state = "pending"
            soak._poll(requests.Session(), job)
    succeeded = {
        j.location: j.result
        for j in soak.ledger.jobs
        if j.state == "succeeded" and j.location and j.result
    }
    ok = report(
        soak,
        soak.reread(soak.before_redis_kill),
        soak.reread(succeeded),
        soak.doubled(),
        time.monotonic() - started,
    )
    print("the supervisor said:")
    for line in stack.lines():
        if "lacuna serve:" in line:
            print("  " + line)
    return ok


if __name__ == "__main__":
    sys.exit(main())
