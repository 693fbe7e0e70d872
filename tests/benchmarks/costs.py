"""``make estimates``: measure jobs over a grid of sizes and fit the cost model.

Every grid point runs the real job path (``workers.jobs.execute_bytes``, what the compute
child runs, the JSON encoding of the result included) in a freshly forked process pinned to
one core, so distance matrices run serially, and records its wall time and the growth of its
address space: VmPeak at the end above VmSize at the start (a forked process starts with
VmPeak at its size), which is what the memory limit bounds. Each measurement is capped
(address space ``--cap-mb`` above its start, wall time ``--cap-s``); a series of growing sizes
stops at the first point over ``--stop-s`` or over a cap. Nothing is sent over a network.

The fit (``workers.spec.costs``): y = exp(f) + exp(s + sum_i e_i log x_i), least squares on
log y (scipy), per kind, written with its R^2 and worst ratio to ``workers/spec/cost_model.json``.

    python -m tests.benchmarks.costs [--out PATH] [--quick]
"""

import argparse
import json
import math
import os
import platform
import resource
import signal
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from datetime import UTC, datetime
from multiprocessing.connection import Pipe
from typing import Any

import numpy as np
from scipy.optimize import least_squares
from scipy.spatial import cKDTree

from service.submissions import Submission, distance_submission, job_submission, stored_input
from workers.jobs import execute_bytes
from workers.jobs.steps import ignore
from workers.memory import MIB, address_space
from workers.spec import SCHEMA_VERSION, DistanceRequest, JobPayload, JobRequest
from workers.spec.arrays import array_sha256, to_npy_bytes
from workers.spec.costs import COST_MODEL_PATH, CostModel, FitQuality, KindFit, PowerLaw
from workers.spec.kinds import GraphArrays

MODEL_VERSION = "1"
"""Bumped when the form of the model or its kinds change."""

FLOOR_BYTES = float(MIB)
"""Smallest peak recorded: below a MiB the growth is allocator noise (arenas, pages)."""

FLOOR_SECONDS = 1e-4


@dataclass(frozen=True)
class Point:
    """One grid point: its sizes (one per regressor) and how to build its submission."""

    sizes: tuple[float, ...]
    build: Callable[[], Submission]


def _payload(submission: Submission) -> JobPayload:
    return JobPayload(
        schema_version=SCHEMA_VERSION,
        input=stored_input(submission, array_sha256(submission.array)),
        task=submission.task,
        request_sha256="0" * 64,
        time_limit_s=3600.0,
    )


def _vm_peak() -> int:
    with open("/proc/self/status", encoding="ascii") as status:
        for line in status:
            if line.startswith("VmPeak:"):
                return int(line.split()[1]) * 1024
    return 0


def measure(submission: Submission, cap_mb: int, cap_s: float) -> tuple[float, float] | None:
    """(seconds, peak bytes) of one job in a forked process; None over a cap or on error."""
    header = {"job_id": "estimate", "payload": _payload(submission).model_dump(mode="json")}
    data = to_npy_bytes(submission.array)
    receiver, sender = Pipe(duplex=False)
    pid = os.fork()
    if pid == 0:  # the measuring child: never returns
        code = 0
        try:
            receiver.close()
            os.sched_setaffinity(0, {min(os.sched_getaffinity(0))})
            start = address_space()
            _, hard = resource.getrlimit(resource.RLIMIT_AS)
            soft = start + cap_mb * MIB
            resource.setrlimit(resource.RLIMIT_AS, (soft if hard < 0 else min(soft, hard), hard))
            started = time.perf_counter()
            result = execute_bytes(header, data, ignore)
            json.dumps(result, allow_nan=False).encode("utf-8")
            seconds = time.perf_counter() - started
            sender.send_bytes(json.dumps([seconds, _vm_peak() - start]).encode())
        except BaseException as error:  # told to the parent, which prints it
            code = 1
            sender.send_bytes(json.dumps(f"{type(error).__name__}: {error}").encode())
        finally:
            os._exit(code)
    sender.close()
    try:
        if receiver.poll(cap_s):
            try:
                answer = json.loads(receiver.recv_bytes())
            except EOFError:
                return None
            if isinstance(answer, str):
                print(f"    failed: {answer}", flush=True)
                return None
            return float(answer[0]), float(answer[1])
        return None
    finally:
        receiver.close()
        try:
            os.kill(pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
        os.waitpid(pid, 0)


def warm_up(submission: Submission) -> None:
    """Run the smallest job of a kind here once, so that the modules it imports lazily are
    loaded before the measuring processes fork (as in a worker that has run jobs)."""
    header = {"job_id": "warm-up", "payload": _payload(submission).model_dump(mode="json")}
    execute_bytes(header, to_npy_bytes(submission.array), ignore)


def _uniform(n: int, d: int, seed: int = 0) -> np.ndarray:
    return np.random.default_rng(seed).uniform(size=(n, d))


def _random_diagram(n: int, rng: np.random.Generator) -> list[list[float]]:
    """n pairs, births uniform on [0, 1), lifetimes uniform on [0, 1): many overlapping points,
    costly for the matching distances."""
    births = rng.uniform(size=n)
    return np.c_[births, births + rng.uniform(size=n)].tolist()


def _rips(n: int, d: int, max_dim: int) -> Submission:
    body = {
        "input": {"type": "points", "points": _uniform(n, d).tolist()},
        "filtration": {"type": "rips", "max_dim": max_dim},
    }
    return job_submission(JobRequest.model_validate(body))


def _cubical(shape: tuple[int, ...]) -> Submission:
    request = JobRequest.model_validate(
        {"input": {"type": "image"}, "filtration": {"type": "cubical"}}
    )
    values = np.random.default_rng(0).uniform(size=shape)  # noise: the most pairs per pixel
    return job_submission(request, values, uploaded=True)


def _graph(nodes: int) -> Submission:
    """A geometric graph: nodes uniform in the unit square, each joined to its 3 nearest."""
    coordinates = _uniform(nodes, 2)
    _, nearest = cKDTree(coordinates).query(coordinates, k=4)
    edges = np.c_[np.repeat(np.arange(nodes), 3), nearest[:, 1:].ravel()].astype(np.int64)
    request = JobRequest.model_validate(
        {"input": {"type": "graph"}, "filtration": {"type": "height", "direction": [1.0, 0.0]}}
    )
    # Given as arrays, as a GraphML upload arrives (repeated edges are dropped, as always).
    return job_submission(request, GraphArrays(coordinates=coordinates, edges=edges), True)


def _diagrams(pairs: int) -> Submission:
    rng = np.random.default_rng(0)
    body = {
        "input": {
            "type": "diagrams",
            "diagrams": [{"dim": 1, "pairs": _random_diagram(pairs, rng)}],
        }
    }
    return job_submission(JobRequest.model_validate(body))


def _distances(metric: str, sizes: list[int], **options: Any) -> Submission:
    rng = np.random.default_rng(0)
    body = {"metric": metric, "diagrams": [_random_diagram(n, rng) for n in sizes], **options}
    return distance_submission(DistanceRequest.model_validate(body), None)


def _vectors(count: int, length: int) -> Submission:
    body = {"metric": "euclidean", "vectors": _uniform(count, length).tolist()}
    return distance_submission(DistanceRequest.model_validate(body), None)


def grid(quick: bool) -> dict[str, tuple[str, list[str], list[list[Point]]]]:
    """kind -> (what is measured, regressors, series of grid points in growing size)."""

    def rips(max_dim: int, sizes: list[int]) -> list[list[Point]]:
        return [
            [Point((n, d), lambda n=n, d=d: _rips(n, d, max_dim)) for n in sizes] for d in (2, 3, 8)
        ]

    def pairs(metric: str, sizes: list[int]) -> list[list[Point]]:
        """Equal pairs, and pairs one 8 times the other: the matching's time follows the
        smaller diagram more than the larger, its edges (memory) their product."""
        return [
            [
                Point(
                    (n + 1.0, ratio * n + 1.0), lambda n=n, r=ratio: _distances(metric, [n, r * n])
                )
                for n in sizes[: len(sizes) - (ratio > 1)]
            ]
            for ratio in (1, 8)
        ]

    short = 2 if quick else 0
    return {
        "rips_h0": (
            "uniform points in the unit cube",
            ["points", "coordinates"],
            rips(0, [500, 1000, 2000, 4000][: 4 - short // 2]),
        ),
        "rips_h1": (
            "uniform points in the unit cube",
            ["points", "coordinates"],
            rips(1, [250, 500, 1000, 2000, 4000][: 5 - short]),
        ),
        "rips_h2": (
            "uniform points in the unit cube",
            ["points", "coordinates"],
            rips(2, [100, 200, 400, 800, 1600][: 5 - short]),
        ),
        "cubical_2d": (
            "uniform noise image, cubical sublevel",
            ["pixels"],
            [
                [
                    Point((s * s,), lambda s=s: _cubical((s, s)))
                    for s in [64, 128, 256, 512, 1024, 2048][: 6 - short]
                ]
            ],
        ),
        "cubical_3d": (
            "uniform noise volume, cubical sublevel",
            ["voxels"],
            [
                [
                    Point((s**3,), lambda s=s: _cubical((s, s, s)))
                    for s in [12, 16, 24, 32, 48, 64, 96, 128, 160][: 9 - short]
                ]
            ],
        ),
        "graph": (
            "geometric graph, 3 nearest neighbours, height filtration",
            ["nodes_and_edges"],
            [
                [
                    Point((4.0 * n,), lambda n=n: _graph(n))
                    for n in [1000, 10_000, 30_000, 100_000, 300_000][: 5 - short]
                ]
            ],
        ),
        "diagrams": (
            "one random diagram, diagrams out",
            ["pairs"],
            [
                [
                    Point((n,), lambda n=n: _diagrams(n))
                    for n in [1000, 10_000, 100_000, 300_000][: 4 - short // 2]
                ]
            ],
        ),
        "wasserstein": (
            "one pair of random diagrams, order 1",
            ["smaller", "larger"],
            pairs("wasserstein", [100, 300, 1000, 2000, 4000][: 5 - short]),
        ),
        "bottleneck": (
            "one pair of random diagrams",
            ["smaller", "larger"],
            pairs("bottleneck", [100, 300, 1000, 2000, 4000][: 5 - short]),
        ),
        "sliced_wasserstein": (
            "one pair of random diagrams",
            ["pairs_times_directions"],
            [
                [
                    Point(
                        ((2 * n + 1.0) * k,),
                        lambda n=n, k=k: _distances("sliced_wasserstein", [n, n], directions=k),
                    )
                    for n in [1000, 10_000, 100_000][: 3 - short // 2]
                ]
                for k in (10, 100)
            ],
        ),
        "matrix": (
            "wasserstein matrix of diagrams of 3 pairs (its own overhead)",
            ["entries"],
            [
                [
                    Point((float(c * c),), lambda c=c: _distances("wasserstein", [3] * c))
                    for c in [4, 16, 64, 128, 256][: 5 - short]
                ]
            ],
        ),
        "vectors": (
            "euclidean matrix of uniform vectors",
            ["entries", "length"],
            [
                [
                    Point((float(c * c), length), lambda c=c, length=length: _vectors(c, length))
                    for c in [50, 200, 800, 1600][: 4 - short // 2]
                ]
                for length in (10, 1000)
            ],
        ),
    }


def _fit(sizes: np.ndarray, values: np.ndarray) -> PowerLaw:
    """exp(f) + exp(s + sizes_log @ e) by least squares on log values."""
    logs = np.log(np.maximum(sizes, 1.0))
    target = np.log(values)
    design = np.c_[np.ones(len(logs)), logs]
    start, *_ = np.linalg.lstsq(design, target, rcond=None)
    floor = math.log(values.min()) - 1.0

    def residuals(theta: np.ndarray) -> np.ndarray:
        predicted = np.logaddexp(theta[0], theta[1] + logs @ theta[2:])
        return predicted - target

    solved = least_squares(
        residuals, np.r_[floor, start], method="lm" if len(values) > 3 else "trf"
    )
    theta = solved.x
    return PowerLaw(
        floor_log=float(theta[0]),
        scale_log=float(theta[1]),
        exponents=[float(e) for e in theta[2:]],
    )


def _quality(law: PowerLaw, sizes: np.ndarray, values: np.ndarray) -> tuple[float, float]:
    predicted = np.array([law.at(list(row)) for row in sizes])
    log_error = np.log(predicted) - np.log(values)
    spread = float(((np.log(values) - np.log(values).mean()) ** 2).sum())
    residual = float((log_error**2).sum())
    # A constant measurement (a peak below the floor at every size) is fitted exactly.
    r2 = 1.0 - residual / spread if spread > 1e-12 else float(residual < 1e-6)
    return r2, float(np.exp(np.abs(log_error)).max())


def measured(
    series: list[list[Point]], args: argparse.Namespace
) -> Iterator[tuple[tuple[float, ...], float, float]]:
    for points in series:
        for point in points:
            outcome = measure(point.build(), args.cap_mb, args.cap_s)
            if outcome is None:
                print(f"    {point.sizes}: over a cap, series stopped", flush=True)
                break
            seconds, peak = outcome
            print(f"    {point.sizes}: {seconds:.3f} s, {peak / MIB:.1f} MiB", flush=True)
            yield point.sizes, seconds, peak
            if seconds > args.stop_s:
                break


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", default=str(COST_MODEL_PATH))
    parser.add_argument("--quick", action="store_true", help="the smaller half of the grid")
    parser.add_argument("--only", nargs="*", help="measure only these kinds")
    parser.add_argument("--cap-mb", type=int, default=3072, help="address space per point")
    parser.add_argument("--cap-s", type=float, default=60.0, help="wall time per point")
    parser.add_argument("--stop-s", type=float, default=15.0, help="end a series beyond this")
    args = parser.parse_args(argv)
    # This process builds the inputs (a 2048^2 image, graphs of 10^6 rows): cap it as well.
    _, hard = resource.getrlimit(resource.RLIMIT_AS)
    mine = address_space() + 2 * args.cap_mb * MIB
    resource.setrlimit(resource.RLIMIT_AS, (mine if hard < 0 else min(mine, hard), hard))
    kinds: dict[str, KindFit] = {}
    for kind, (data, regressors, series) in grid(args.quick).items():
        if args.only and kind not in args.only:
            continue
        print(f"{kind}: {data}", flush=True)
        rows = list(measured(series, args))
        if len(rows) < 3:
            print(f"  only {len(rows)} points measured: {kind} left as it was", flush=True)
            continue
        sizes = np.array([row[0] for row in rows], dtype=np.float64)
        seconds = np.maximum([row[1] for row in rows], FLOOR_SECONDS)
        peaks = np.maximum([row[2] for row in rows], FLOOR_BYTES)
        time_law, peak_law = _fit(sizes, seconds), _fit(sizes, peaks)
        time_r2, time_worst = _quality(time_law, sizes, seconds)
        peak_r2, peak_worst = _quality(peak_law, sizes, peaks)
        kinds[kind] = KindFit(
            regressors=regressors,
            data=data,
            seconds=time_law,
            peak_bytes=peak_law,
            fit=FitQuality(
                measured=len(rows),
                seconds_r2=round(time_r2, 4),
                seconds_worst_ratio=round(time_worst, 3),
                peak_r2=round(peak_r2, 4),
                peak_worst_ratio=round(peak_worst, 3),
                sizes={
                    name: [float(sizes[:, k].min()), float(sizes[:, k].max())]
                    for k, name in enumerate(regressors)
                },
            ),
            measurements=[[*row[0], row[1], row[2]] for row in rows],
        )
        print(
            f"  seconds R^2 {time_r2:.3f} worst x{time_worst:.2f}; "
            f"peak R^2 {peak_r2:.3f} worst x{peak_worst:.2f}",
            flush=True,
        )
    if args.only and COST_MODEL_PATH.exists():  # refit some kinds, keep the others
        kinds = {**CostModel.model_validate_json(COST_MODEL_PATH.read_text()).kinds, **kinds}
    model = CostModel(
        version=MODEL_VERSION,
        fitted_at=datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        machine=_machine(),
        kinds=kinds,
    )
    with open(args.out, "w", encoding="utf-8") as out:
        out.write(model.model_dump_json(indent=1) + "\n")
    print(f"wrote {args.out}")
    return 0


def _machine() -> str:
    model = platform.processor() or platform.machine()
    try:
        with open("/proc/cpuinfo", encoding="utf-8") as info:
            for line in info:
                if line.startswith("model name"):
                    model = line.split(":", 1)[1].strip()
                    break
    except OSError:
        pass
    return f"{model}, {os.cpu_count()} cores, Python {platform.python_version()}"


if __name__ == "__main__":
    raise SystemExit(main())
