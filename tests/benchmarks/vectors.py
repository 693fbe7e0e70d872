"""Feature and distance tables of ``make bench``: lacuna against gudhi, hera (through gudhi) and
persim, measured side by side in one run.

1. Persistence images of 1000 diagrams against persim (pixel integrals, as ours) and gudhi
   (Gaussian samples at grid nodes).
2. Bottleneck distance of one pair (1000 and 5000 points) against gudhi (default and e = 0),
   hera (1 % approximate) and persim, with lacuna's peak memory.
3. 1-Wasserstein distance of one pair against gudhi's POT backend (exact), hera and persim.
4. Distance matrices of 100 diagrams (4950 pairs) on 2 processes against the fastest exact
   reference and persim looping over the same pairs, also on 2 processes.

Every call runs in a forked child, stopped at a cap; every value is checked against a
reference that computes the same thing.
"""

import ctypes
import json
import multiprocessing
import os
import resource
import signal
import statistics
import time
import tracemalloc
from collections.abc import Callable, Iterator
from concurrent.futures import ThreadPoolExecutor
from contextlib import contextmanager
from dataclasses import dataclass
from functools import partial
from multiprocessing.connection import Connection
from typing import Any

import gudhi
import gudhi.hera
import gudhi.wasserstein
import numpy as np
import persim
from gudhi.representations import PersistenceImage

from workers.core.bottleneck import bottleneck_distance
from workers.core.persistence_image import persistence_images
from workers.core.wasserstein import wasserstein_distance
from workers.jobs.pairwise import distance_matrix
from workers.spec.jobs import DistanceTask

Distance = Callable[[np.ndarray, np.ndarray], float]

PERSIM_CAP = 60.0
"""Seconds allowed to one persim run: at 5000 points it needs tens of seconds and GBs."""

EXACT = 1e-9
"""Relative agreement expected between two exact computations of the same value."""

_PR_SET_PDEATHSIG = 1


def _images_on_threads(batch: list[np.ndarray], threads: int) -> np.ndarray:
    """The benchmark's images, the batch split over ``threads`` threads (erf and the matrix
    products release the GIL)."""

    def images(part: list[np.ndarray]) -> np.ndarray:
        return persistence_images(
            part,
            birth_range=(0.0, 1.0),
            persistence_range=(0.0, 1.0),
            resolution=(20, 20),
            sigma=0.05,
            weight="linear",
            max_persistence=1.0,
        )

    if threads == 1:
        return images(batch)
    step = -(-len(batch) // threads)
    with ThreadPoolExecutor(threads) as pool:
        parts = list(pool.map(images, [batch[i : i + step] for i in range(0, len(batch), step)]))
    return np.concatenate(parts)


def diagrams(count: int, points: int, seed: int) -> list[np.ndarray]:
    """``count`` finite diagrams (points, 2) shaped like H1 diagrams of tissue point clouds.

    Births uniform on [0, 1], lifetimes exponential with mean 0.1: most points lie near the
    diagonal, a few far from it.
    """
    rng = np.random.default_rng(seed)
    births = rng.uniform(0.0, 1.0, (count, points))
    deaths = births + rng.exponential(0.1, (count, points))
    return list(np.stack([births, deaths], axis=-1))


@dataclass(frozen=True)
class Timed:
    """Median seconds of a measured call and the value of its last run."""

    seconds: float
    value: np.ndarray


def _timed_in_child(call: Callable[[], Any], repeats: int, cap: float) -> Timed | None:
    """Run ``call`` ``repeats`` times in a forked child; None if stopped after ``cap`` s a run."""
    context = multiprocessing.get_context("fork")
    receiver, sender = context.Pipe(duplex=False)

    def child() -> None:
        times = []
        for _ in range(repeats):
            started = time.perf_counter()
            value = call()
            times.append(time.perf_counter() - started)
        value = np.asarray(value, dtype="<f8")  # tobytes() writes C order
        sender.send_bytes(json.dumps({"times": times, "shape": value.shape}).encode())
        sender.send_bytes(value.tobytes())

    process = context.Process(target=child)
    process.start()
    sender.close()
    try:
        if not receiver.poll(cap * repeats):
            process.kill()
            return None
        try:
            header = json.loads(receiver.recv_bytes())
            value = np.frombuffer(receiver.recv_bytes(), dtype="<f8").reshape(
                tuple(header["shape"])
            )
        except EOFError:  # the child raised: its traceback is on stderr
            raise RuntimeError("a measured call failed in its child process") from None
        return Timed(statistics.median(header["times"]), value)
    finally:
        process.join()
        receiver.close()


def _status_kb(field: str) -> int:
    with open("/proc/self/status") as status:
        for line in status:
            if line.startswith(field + ":"):
                return int(line.split()[1])
    raise RuntimeError(f"no {field} in /proc/self/status")


def _rss_rise(call: Callable[[], Any]) -> float:
    """Peak resident set during ``call`` above the one before it, in bytes."""
    with open("/proc/self/clear_refs", "w") as clear:
        clear.write("5")  # resets VmHWM to the current resident set (Linux >= 4.0)
    before = _status_kb("VmRSS")
    call()
    return 1024.0 * (_status_kb("VmHWM") - before)


def _traced_peak(call: Callable[[], Any]) -> float:
    """Peak of the memory tracemalloc sees during ``call`` (numpy arrays included), in bytes."""
    tracemalloc.start()
    call()
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return float(peak)


def _peak_memory(call: Callable[[], Any], cap: float) -> str:
    """Peak memory of ``call`` as a table cell, each measure in a fresh forked child.

    Resident set covers C++ allocations too; tracemalloc is the cross-check. Separate children
    so that memory kept by the allocator after one run cannot hide the other's peak.
    """
    cells = []
    for measure in (_rss_rise, _traced_peak):
        answer = _timed_in_child(partial(measure, call), 1, cap)
        cells.append("?" if answer is None else f"{float(answer.value) / 2**20:.1f} MB")
    return f"{cells[0]} RSS ({cells[1]} traced)"


def _send_values(
    compute: Callable[[np.ndarray], np.ndarray], share: np.ndarray, sender: Connection
) -> None:
    # dies with its parent, so stopping a capped measurement stops its helpers too
    ctypes.CDLL(None, use_errno=True).prctl(_PR_SET_PDEATHSIG, signal.SIGKILL)
    sender.send_bytes(np.ascontiguousarray(compute(share), dtype="<f8").tobytes())


def _on_processes(
    compute: Callable[[np.ndarray], np.ndarray], total: int, processes: int
) -> np.ndarray:
    """compute(indices) for indices 0..total-1 dealt out in turn to forked processes."""
    context = multiprocessing.get_context("fork")
    running = []
    for rank in range(processes):
        share = np.arange(rank, total, processes)
        receiver, sender = context.Pipe(duplex=False)
        process = context.Process(target=_send_values, args=(compute, share, sender))
        process.start()
        sender.close()
        running.append((share, process, receiver))
    values = np.empty(total)
    for share, process, receiver in running:
        values[share] = np.frombuffer(receiver.recv_bytes(), dtype="<f8")
        process.join()
        receiver.close()
    return values


def _agree(value: np.ndarray, exact: np.ndarray, tolerance: float) -> bool:
    """Is ``value`` within ``tolerance`` of ``exact``, relative to ``exact``?"""
    return bool(np.all(np.abs(value - exact) <= tolerance * np.maximum(np.abs(exact), 1e-12)))


def _median(timed: Timed | None, scale: float = 1.0) -> float | None:
    return None if timed is None else timed.seconds * scale


def _seconds(timed: Timed | None, cap: float, scale: float = 1.0) -> str:
    return f"> {cap * scale:.0f}" if timed is None else f"{timed.seconds * scale:.3f}"


def _ratio(top: float | None, bottom: float | None, cap: float) -> str:
    """top / bottom, either side None when it was stopped at ``cap`` (then a bound)."""
    if top is None:
        return "?" if bottom is None else f"> {cap / bottom:.3g}"
    if bottom is None:
        return f"< {top / cap:.3g}"
    return f"{top / bottom:.3g}"


def _cpu_seconds() -> tuple[float, float, float]:
    """(wall clock, CPU seconds of the whole machine, CPU seconds of us and our children)."""
    with open("/proc/stat") as stat:
        user, nice, system, _idle, _wait, irq, softirq = map(int, stat.readline().split()[1:8])
    ours = sum(
        usage.ru_utime + usage.ru_stime
        for usage in (
            resource.getrusage(resource.RUSAGE_SELF),
            resource.getrusage(resource.RUSAGE_CHILDREN),  # children are all waited for
        )
    )
    machine = (user + nice + system + irq + softirq) / os.sysconf("SC_CLK_TCK")
    return time.monotonic(), machine, ours


@contextmanager
def _other_load() -> Iterator[None]:
    """Print how busy other processes kept the machine while a table ran: on a shared machine
    that is what makes times (and ratios measured at different moments) unreliable."""
    wall, machine, ours = _cpu_seconds()
    yield
    wall_end, machine_end, ours_end = _cpu_seconds()
    other = max(0.0, (machine_end - machine) - (ours_end - ours)) / (wall_end - wall)
    cores = len(os.sched_getaffinity(0))
    print(
        f"\nOther processes kept {other:.2f} of {cores} cores busy on average during this table"
        + (" (times unreliable)." if other > 0.1 else "."),
        flush=True,
    )


@_other_load()
def features_table(cap: float) -> None:
    """Persistence images of many diagrams at once, lacuna on 1 and 2 threads."""
    count, points, sample = 1000, 200, 100
    batch = diagrams(count, points, seed=7)
    print(
        f"\n## Persistence images: {count} diagrams of {points} points, 20 x 20 pixels on "
        "[0, 1] x [0, 1], sigma 0.05, linear weight up to persistence 1: median seconds\n"
    )
    print(
        "Goal: lacuna >= 50x faster than persim and no slower than gudhi. persim computes "
        f"the same exact pixel integrals; it is timed on the first {sample} diagrams and the "
        f"time multiplied by {count // sample}, and its images are checked against lacuna's "
        "(max abs difference < 1e-10). gudhi samples the Gaussians at the 20 x 20 grid nodes "
        "instead of integrating over pixels, so its values are not compared.\n"
    )
    # persim's kernel takes a covariance matrix; its linear ramp equals min(p / 1, 1) on [0, 1]
    imager = persim.PersistenceImager(
        birth_range=(0.0, 1.0),
        pers_range=(0.0, 1.0),
        pixel_size=0.05,
        weight="linear_ramp",
        weight_params={"low": 0.0, "high": 1.0, "start": 0.0, "end": 1.0},
        kernel_params={"sigma": np.array([[0.05**2, 0.0], [0.0, 0.05**2]])},
    )
    persim_run = _timed_in_child(
        lambda: np.asarray(imager.transform(batch[:sample], skew=True)), 3, cap
    )
    sampled = PersistenceImage(
        bandwidth=0.05,
        weight=lambda x: min(x[1], 1.0),  # x is (birth, persistence)
        resolution=[20, 20],
        im_range=[0.0, 1.0, 0.0, 1.0],
    )
    gudhi_run = _timed_in_child(lambda: sampled.fit_transform(batch), 3, cap)
    scale = count / sample
    persim_seconds = _median(persim_run, scale)
    print(
        f"| lacuna | lacuna s | persim s ({sample} diagrams x {scale:.0f}) | gudhi s "
        "| persim / lacuna (goal >= 50) | lacuna / gudhi (goal <= 1) | values |"
    )
    print("|---|---|---|---|---|---|---|")
    images = {}
    for threads in (1, 2):
        run = partial(_images_on_threads, batch, threads)
        ours = _timed_in_child(run, 5, cap)
        if ours is None:
            print(f"| {threads} thread(s) | > {cap:.0f} | | | | | lacuna capped |", flush=True)
            continue
        images[threads] = ours.value
        notes = []
        if persim_run is not None:
            gap = float(np.abs(ours.value[:sample] - persim_run.value).max())
            notes.append(f"persim max diff {gap:.1e}" + ("" if gap < 1e-10 else " (differs!)"))
        if threads == 2 and 1 in images:
            gap = float(np.abs(images[1] - images[2]).max())
            notes.append(f"1 vs 2 threads {gap:.1e}" + ("" if gap < 1e-12 else " (differs!)"))
        print(
            f"| {threads} thread(s) | {ours.seconds:.3f} | {_seconds(persim_run, cap, scale)} "
            f"| {_seconds(gudhi_run, cap)} "
            f"| {_ratio(persim_seconds, ours.seconds, cap * scale)} "
            f"| {_ratio(ours.seconds, _median(gudhi_run), cap)} "
            f"| {'; '.join(notes)} |",
            flush=True,
        )


@dataclass(frozen=True)
class Reference:
    """A reference distance; ``tolerance``: the relative agreement it promises with ours
    (None: it computes another distance, not compared); ``cap``: its own cap in seconds."""

    name: str
    distance: Distance
    tolerance: float | None
    cap: float | None = None


@_other_load()
def _pair_table(
    title: str, goal: str, ours: Distance, references: list[Reference], sizes: list[int], cap: float
) -> None:
    print(f"\n## {title}: median seconds (1 core)\n")
    print(goal + "\n")
    names = [reference.name for reference in references]
    print(
        "| points | lacuna s | "
        + " | ".join(f"{name} s" for name in names)
        + " | "
        + " | ".join(f"lacuna / {name}" for name in names)
        + " | lacuna peak memory |"
    )
    print("|---|---|" + "---|" * (2 * len(names) + 1))
    for n in sizes:
        a, b = diagrams(2, n, seed=n)
        repeats = 3 if n <= 1000 else 1
        mine = _timed_in_child(partial(ours, a, b), 3, cap)
        if mine is None:
            print(f"| {n} | > {cap:.0f} | lacuna capped |", flush=True)
            continue
        times, ratios = [], []
        for reference in references:
            limit = min(cap, reference.cap or cap)
            theirs = _timed_in_child(partial(reference.distance, a, b), repeats, limit)
            cell = _seconds(theirs, limit)
            if theirs is not None and reference.tolerance is not None:
                if not _agree(theirs.value, mine.value, reference.tolerance):
                    cell += f" (differs! {float(theirs.value):.12g} vs {float(mine.value):.12g})"
            times.append(cell)
            ratios.append(_ratio(mine.seconds, _median(theirs), limit))
        memory = _peak_memory(partial(ours, a, b), cap)
        print(
            f"| {n} | {mine.seconds:.4f} | "
            + " | ".join(times)
            + " | "
            + " | ".join(ratios)
            + f" | {memory} |",
            flush=True,
        )


def _hera_wasserstein(a: np.ndarray, b: np.ndarray) -> float:
    return float(gudhi.hera.wasserstein_distance(a, b, order=1, internal_p=np.inf, delta=0.01))


def _pot_wasserstein(a: np.ndarray, b: np.ndarray, order: float = 1.0) -> float:
    return float(gudhi.wasserstein.wasserstein_distance(a, b, order=order, internal_p=np.inf))


def bottleneck_table(sizes: list[int], cap: float) -> None:
    references = [
        Reference("gudhi", gudhi.bottleneck_distance, EXACT),
        Reference("gudhi e=0", partial(gudhi.bottleneck_distance, e=0), EXACT),
        Reference("hera 1%", partial(gudhi.hera.bottleneck_distance, delta=0.01), 0.01),
        Reference("persim", persim.bottleneck, EXACT, PERSIM_CAP),
    ]
    _pair_table(
        "Bottleneck distance, one pair of diagrams",
        "Goal: lacuna no slower than any reference, peak memory < 300 MB at 5000 points. "
        "gudhi's default (e=None) is exact up to rounding, e=0 is its exact mode, hera "
        f"(delta 0.01) is within 1 %: each value is checked to that. persim is capped at "
        f"{PERSIM_CAP:.0f} s (it needs GBs at 5000 points). Peak memory: resident set rise "
        "during the call, and tracemalloc's peak.",
        bottleneck_distance,
        references,
        sizes,
        cap,
    )


def wasserstein_table(sizes: list[int], cap: float) -> None:
    references = [
        Reference("gudhi POT", _pot_wasserstein, EXACT),
        Reference("hera 1%", _hera_wasserstein, 0.01),
        Reference("persim", persim.wasserstein, None, PERSIM_CAP),
    ]
    _pair_table(
        "1-Wasserstein distance (L-infinity ground metric), one pair of diagrams",
        "Goal: lacuna no slower than any reference, peak memory < 300 MB at 5000 points. "
        "gudhi.wasserstein (POT backend) is exact and checked to 1e-9, hera (delta 0.01) "
        "to 1 %. persim.wasserstein uses the Euclidean ground metric, a different distance, "
        f"so its value is not compared; it is capped at {PERSIM_CAP:.0f} s.",
        wasserstein_distance,
        references,
        sizes,
        cap,
    )


def _loop(distance: Distance, batch: list[np.ndarray], rows: np.ndarray, cols: np.ndarray) -> Any:
    """A call computing distance over the pairs (rows[k], cols[k]) on 2 processes."""

    def compute(indices: np.ndarray) -> np.ndarray:
        return np.array([distance(batch[rows[k]], batch[cols[k]]) for k in indices])

    return partial(_on_processes, compute, len(rows), 2)


def _ignore_progress(done: int, total: int) -> None:
    pass


@_other_load()
def matrix_table(cap: float) -> None:
    """Whole distance matrices, every metric on 2 processes for lacuna and the references."""
    count, points, sample = 100, 200, 100
    batch = diagrams(count, points, seed=11)
    rows, cols = np.triu_indices(count, k=1)
    spread = np.linspace(0, len(rows) - 1, sample).astype(int)  # across the whole matrix
    scale = len(rows) / sample
    print(
        f"\n## Distance matrix: {count} diagrams of {points} points ({len(rows)} pairs), "
        "2 processes each: median seconds\n"
    )
    print(
        "Goal: lacuna / fastest exact reference <= 1.0 and persim / lacuna >= 10. The "
        "references loop over the same pairs split over 2 forked processes, as lacuna does. "
        f"persim is timed on {sample} pairs spread over the matrix and the time multiplied by "
        f"{scale:.1f}; persim.wasserstein is order 1 with the Euclidean ground metric, so it "
        "is not compared and has no p = 2 row. Every pair of the exact reference is checked "
        "against lacuna to 1e-9 (relative).\n"
    )
    print(
        "| metric | lacuna s | exact reference | reference s | persim s "
        f"({sample} pairs x {scale:.1f}) | lacuna / reference (goal <= 1.0) "
        "| persim / lacuna (goal >= 10) | values |"
    )
    print("|---|---|---|---|---|---|---|---|")
    cases: list[tuple[str, float | None, str, Distance, Distance | None, float | None]] = [
        ("bottleneck", None, "gudhi", gudhi.bottleneck_distance, persim.bottleneck, EXACT),
        ("wasserstein", 1.0, "gudhi POT", _pot_wasserstein, persim.wasserstein, None),
        ("wasserstein", 2.0, "gudhi POT", partial(_pot_wasserstein, order=2.0), None, None),
    ]
    for metric, order, name, exact, persim_distance, persim_tolerance in cases:
        label = metric if order is None else f"{metric} p={order:g}"
        task = DistanceTask(type="distances", metric=metric, order=order, count=count)

        def ours(task: DistanceTask = task) -> np.ndarray:
            return distance_matrix(batch, task, _ignore_progress, processes=2)[0][rows, cols]

        mine = _timed_in_child(ours, 3, cap)
        if mine is None:
            print(f"| {label} | > {cap:.0f} | lacuna capped |", flush=True)
            continue
        reference = _timed_in_child(_loop(exact, batch, rows, cols), 1, cap)
        notes = []
        if reference is not None:
            worst = float(
                np.max(np.abs(mine.value - reference.value) / np.maximum(reference.value, 1e-12))
            )
            agreed = _agree(mine.value, reference.value, EXACT)
            notes.append(
                f"{len(rows)} pairs vs {name}: max rel diff {worst:.1e}"
                + ("" if agreed else " (differs!)")
            )
        persim_cell, persim_ratio = "n/a", "n/a"
        if persim_distance is not None:
            persim_cap = min(cap, PERSIM_CAP)
            theirs = _timed_in_child(
                _loop(persim_distance, batch, rows[spread], cols[spread]), 1, persim_cap
            )
            persim_cell = _seconds(theirs, persim_cap, scale)
            persim_ratio = _ratio(_median(theirs, scale), mine.seconds, persim_cap * scale)
            if theirs is not None and persim_tolerance is not None:
                agreed = _agree(mine.value[spread], theirs.value, persim_tolerance)
                notes.append(f"{sample} pairs vs persim " + ("agree" if agreed else "differ!"))
        print(
            f"| {label} | {mine.seconds:.3f} | {name} | {_seconds(reference, cap)} "
            f"| {persim_cell} | {_ratio(mine.seconds, _median(reference), cap)} "
            f"| {persim_ratio} | {'; '.join(notes)} |",
            flush=True,
        )


def distance_tables(sizes: list[int], cap: float) -> None:
    """Single pairs of ``sizes`` points each, then distance matrices."""
    bottleneck_table(sizes, cap)
    wasserstein_table(sizes, cap)
    matrix_table(cap)
