"""``make bench``: lacuna against reference libraries, measured side by side in one run.

Eleven tables, all ratios (no absolute targets in tests):

1. Rips engine (H0+H1, full filtration) against ripser, gudhi with edge collapse and
   giotto-ph, on uniform points and noisy circles; diagrams are checked equal.
2. End to end through HTTP, Redis and a worker against the in-process computation.
3. Throughput of 200 small jobs on 2 workers against a bare in-process loop.
4.-7. Persistence images, bottleneck and 1-Wasserstein distances of one pair, and distance
   matrices, against gudhi, hera and persim (tests/benchmarks/vectors.py).
8. Cubical persistence of a 2048^2 image and 128^3 volumes against gudhi and cripser
   (tests/benchmarks/cubical.py).
9. Graph persistence (H0+H1) of a random geometric graph with 10^6 edges against gudhi's
   SimplexTree, and skeleton graphs of a 512^2 and a 128^3 mask against scikit-image's
   skeletonize alone (tests/benchmarks/graphs.py).
10. Start-up of the installed `lacuna --help` against `python -c pass` and importing requests
    and numpy (tests/benchmarks/startup.py).
11. Dowker persistence of two populations (2k/500 to 20k/5k points) against a Python loop
    filling a gudhi SimplexTree (tests/benchmarks/dowker.py).

Options: ``--quick`` skips n = 2000 (Rips) and 5000 (one pair); ``--cap S`` bounds each
reference run (default 120 s); ``--only`` runs one group of tables.
"""

import argparse
import json
import math
import multiprocessing
import os
import signal
import statistics
import subprocess
import sys
import tempfile
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Any

import gudhi
import numpy as np
import requests

from tests.benchmarks.cubical import cubical_table
from tests.benchmarks.dowker import dowker_table
from tests.benchmarks.engines import REFERENCES, Engine, lacuna, ripser
from tests.benchmarks.graphs import graph_table, skeleton_table
from tests.benchmarks.startup import startup_table
from tests.benchmarks.vectors import distance_tables, features_table
from tests.support.ports import free_port
from tests.support.synthetic import FAMILIES, noisy_circle


def _measure_in_child(engine: Engine, points: np.ndarray, repeats: int, cap: float) -> dict:
    """Run ``engine`` in a forked child (so a slow one can be stopped at ``cap``)."""
    receiver, sender = multiprocessing.get_context("fork").Pipe(duplex=False)

    def child() -> None:
        times, diagrams = [], []
        for _ in range(repeats):
            started = time.perf_counter()
            diagrams = engine(points)
            times.append(time.perf_counter() - started)
        sender.send_bytes(
            json.dumps(
                {"times": times, "diagrams": [np.asarray(d).tolist() for d in diagrams]}
            ).encode()
        )

    process = multiprocessing.get_context("fork").Process(target=child)
    process.start()
    sender.close()
    if receiver.poll(cap * repeats):
        answer = json.loads(receiver.recv_bytes(), parse_constant=float)
        process.join()
        return answer
    process.kill()
    process.join()
    return {"times": None, "diagrams": None}


def _same(ours: list[np.ndarray], theirs: list[list[Any]]) -> bool:
    for k in (0, 1):
        a = np.asarray(ours[k], dtype=float).reshape(-1, 2)
        b = np.asarray(theirs[k], dtype=float).reshape(-1, 2)
        b = b[b[:, 1] > b[:, 0]]
        finite = a[np.isfinite(a)]
        bound = 1e-5 * (float(finite.max()) if finite.size else 1.0)
        if gudhi.bottleneck_distance(a, b) > bound:
            return False
    return True


def engine_table(sizes: list[int], cap: float) -> None:
    names = ["lacuna", *REFERENCES]
    print("\n## Rips engine, H0+H1, full filtration: median seconds (2 cores)\n")
    print("| data | n | " + " | ".join(names) + " | lacuna / fastest reference |")
    print("|---|---|" + "---|" * (len(names) + 1))
    for family, make in FAMILIES.items():
        for n in sizes:
            points = make(n, 1)
            repeats = 3 if n <= 1000 else 1
            ours = _measure_in_child(lacuna, points, repeats, cap)
            if ours["times"] is None:
                cells = [f"> {cap:.0f}"]
                print(f"| {family} | {n} | " + " | ".join(cells) + " | lacuna capped |")
                continue
            mine = statistics.median(ours["times"])
            cells = [f"{mine:.3f}"]
            best = math.inf
            for engine in REFERENCES.values():
                theirs = _measure_in_child(engine, points, repeats, cap)
                if theirs["times"] is None:
                    cells.append(f"> {cap:.0f}")
                    best = min(best, cap)  # at least this slow: the ratio is an upper bound
                    continue
                seconds = statistics.median(theirs["times"])
                best = min(best, seconds)
                equal = _same(ours["diagrams"], theirs["diagrams"])
                cells.append(f"{seconds:.3f}" + ("" if equal else " (differs!)"))
            ratio = mine / best
            print(f"| {family} | {n} | " + " | ".join(cells) + f" | {ratio:.2f} |", flush=True)


class Stack:
    """A real `lacuna serve` (embedded Redis, 2 workers) for the HTTP measurements."""

    def __enter__(self) -> str:
        port = free_port()
        env = {k: v for k, v in os.environ.items() if k != "LACUNA_REDIS_URL"}
        env["LACUNA_PORT"] = str(port)
        # A data directory of its own: never the user's (nor its lock), gone after the run.
        self.data_dir = tempfile.TemporaryDirectory(prefix="lacuna-bench-")
        env["LACUNA_DATA_DIR"] = self.data_dir.name
        lacuna_command = str(Path(sys.executable).with_name("lacuna"))
        self.process = subprocess.Popen(
            [lacuna_command, "serve"], env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL
        )
        self.base = f"http://127.0.0.1:{port}"
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            try:
                answer = requests.get(self.base + "/readyz", timeout=1)
                if answer.status_code == 200 and answer.json()["workers"] >= 2:
                    return self.base
            except requests.RequestException:
                pass
            time.sleep(0.1)
        raise RuntimeError("lacuna serve did not become ready")

    def __exit__(self, *exc: object) -> None:
        self.process.send_signal(signal.SIGTERM)
        self.process.wait(30)
        self.data_dir.cleanup()


def _job(points: np.ndarray) -> dict[str, Any]:
    return {
        "input": {"type": "points", "points": points.tolist()},
        "filtration": {"type": "rips", "max_dim": 1},
    }


def end_to_end_table(base: str) -> None:
    print("\n## End to end (HTTP + Redis + worker) against in-process, noisy circle, H1\n")
    print(
        "| n | in-process lacuna s | in-process ripser s | end to end s "
        "| e2e / in-process lacuna | e2e / ripser |"
    )
    print("|---|---|---|---|---|---|")
    session = requests.Session()
    for n in (500, 1000):
        points = noisy_circle(n, seed=2)
        direct, library, e2e = [], [], []
        for _ in range(3):
            started = time.perf_counter()
            lacuna(points)
            direct.append(time.perf_counter() - started)
            started = time.perf_counter()
            ripser(points)
            library.append(time.perf_counter() - started)
            started = time.perf_counter()
            answer = session.post(
                base + "/v1/jobs", json=_job(points), headers={"Prefer": "wait=30"}
            )
            e2e.append(time.perf_counter() - started)
            assert answer.status_code == 200, answer.text
        d, r, e = (statistics.median(x) for x in (direct, library, e2e))
        print(f"| {n} | {d:.3f} | {r:.3f} | {e:.3f} | {e / d:.2f} | {e / r:.2f} |", flush=True)


def _batch_then_fetch(base: str, jobs: list[dict[str, Any]]) -> None:
    """Submit every job, then collect every result (each a blocking wait, no polling)."""
    session = requests.Session()

    def fetch(answer: requests.Response) -> None:
        location = answer.headers["Location"]
        result = session.get(base + location + "/result", headers={"Prefer": "wait=30"})
        if result.status_code != 200:
            raise RuntimeError(f"{location}: {result.text}")

    with ThreadPoolExecutor(4) as pool:
        answers = list(pool.map(lambda job: session.post(base + "/v1/jobs", json=job), jobs))
        list(pool.map(fetch, answers))


def _blocking_submits(base: str, jobs: list[dict[str, Any]]) -> None:
    """8 clients, each posting with Prefer: wait and getting the result in the same answer."""
    session = requests.Session()

    def submit(job: dict[str, Any]) -> None:
        answer = session.post(base + "/v1/jobs", json=job, headers={"Prefer": "wait=30"})
        if answer.status_code != 200:
            raise RuntimeError(answer.text)

    with ThreadPoolExecutor(8) as pool:
        list(pool.map(submit, jobs))


def throughput_table(base: str, count: int = 200) -> None:
    clouds = [noisy_circle(100, seed=s) for s in range(count)]
    started = time.perf_counter()
    for points in clouds:
        lacuna(points)
    bare = time.perf_counter() - started
    jobs = [_job(points) for points in clouds]
    print(f"\n## Throughput: {count} jobs of 100 points (H1), 2 workers, all on 2 cores\n")
    print("| client pattern | bare loop s | jobs/s | lacuna s | jobs/s | lacuna / bare |")
    print("|---|---|---|---|---|---|")
    for name, pattern in (
        ("submit all, then fetch (4 threads)", _batch_then_fetch),
        ("POST with Prefer: wait (8 threads)", _blocking_submits),
    ):
        started = time.perf_counter()
        pattern(base, jobs)
        served = time.perf_counter() - started
        print(
            f"| {name} | {bare:.3f} | {count / bare:.0f} | {served:.3f} | {count / served:.0f} "
            f"| {bare / served:.2f} |",
            flush=True,
        )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--quick", action="store_true", help="skip n = 2000 and 5000")
    parser.add_argument("--cap", type=float, default=120.0, help="seconds per reference run")
    parser.add_argument(
        "--only",
        choices=[
            "engine",
            "service",
            "features",
            "distances",
            "cubical",
            "graphs",
            "cli",
            "dowker",
        ],
        default=None,
    )
    args = parser.parse_args()
    if args.only in (None, "service"):
        with Stack() as base:
            end_to_end_table(base)
            throughput_table(base)
    if args.only in (None, "engine"):
        engine_table([500, 1000] if args.quick else [500, 1000, 2000], args.cap)
    if args.only in (None, "features"):
        features_table(args.cap)
    if args.only in (None, "distances"):
        distance_tables([1000] if args.quick else [1000, 5000], args.cap)
    if args.only in (None, "cubical"):
        cubical_table(args.cap)
    if args.only in (None, "graphs"):
        graph_table(args.cap)
        skeleton_table(args.cap)
    if args.only in (None, "cli"):
        startup_table(cap=args.cap)
    if args.only in (None, "dowker"):
        dowker_table(args.cap)


if __name__ == "__main__":
    main()
