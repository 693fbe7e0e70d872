"""The memory limit of a job: every way the compute child gives way under RLIMIT_AS ends as a
memory-limit problem naming the limit, and the next job runs in a fresh child.

References: setrlimit(2) (an mmap or brk past RLIMIT_AS fails with ENOMEM, no signal);
malloc(3) (returns NULL on ENOMEM); C++ [new.delete.single] (operator new throws
std::bad_alloc), which gudhi's bindings raise as MemoryError (pybind11's documented
exception translation); abort(3) (SIGABRT, what an uncaught exception ends in).
"""

import ctypes
import faulthandler
import resource
import subprocess
import sys
from collections.abc import Iterator
from typing import Any

import gudhi
import numpy as np
import pytest

from tests.support.bodies import rips_payload
from tests.support.processes import running
from workers.compute import ComputeProcess, JobAborted, Report
from workers.jobs import execute_bytes, pairwise
from workers.jobs import points as _points  # noqa: F401  (imported before forking, as a worker does)
from workers.memory import MIB, address_space, address_space_cap, headroom
from workers.settings import WorkerSettings
from workers.spec import DistanceTask, JobPayload
from workers.spec.arrays import to_npy_bytes

LIMIT_MB = 64
MEMORY_LIMIT = "urn:lacuna:problem:memory-limit"


@pytest.fixture(autouse=True)
def capped_test_process() -> Iterator[None]:
    """This process, and every child it forks, stays within 3 GiB more than it has now."""
    before = resource.getrlimit(resource.RLIMIT_AS)
    with address_space_cap(3 * 1024 * MIB):
        yield
    assert resource.getrlimit(resource.RLIMIT_AS) == before


def payload(points: np.ndarray, limit_mb: int | None, max_dim: int = 0) -> JobPayload:
    return rips_payload(points, max_dim=max_dim, time_limit_s=60, memory_limit_mb=limit_mb)


def run(
    compute: ComputeProcess, limit_mb: int | None, points: np.ndarray | None = None
) -> dict[str, Any]:
    points = np.array([[0.0, 0.0], [3.0, 4.0]]) if points is None else points
    return compute.run(
        job_id="job",
        payload=payload(points, limit_mb),
        input_bytes=to_npy_bytes(points),
        time_limit_s=60,
        should_stop=lambda: False,
    )


def aborted_by(compute: ComputeProcess, limit_mb: int | None) -> dict[str, Any]:
    with pytest.raises(JobAborted) as aborted:
        run(compute, limit_mb)
    return aborted.value.problem.model_dump()


def _numpy_beyond(header: dict[str, Any], data: bytes, report: Report) -> dict[str, Any]:
    """Twice the limit in one numpy array (written, so it is not merely reserved)."""
    return {"sum": float(np.ones(2 * LIMIT_MB * MIB // 8).sum())}


def _gudhi_beyond(header: dict[str, Any], data: bytes, report: Report) -> dict[str, Any]:
    """All simplices up to dimension 3 on 300 points (~4.5e8 of them): far beyond the limit,
    in gudhi's C++ (operator new)."""
    points = np.random.default_rng(0).uniform(size=(300, 3))
    tree = gudhi.RipsComplex(points=points).create_simplex_tree(max_dimension=3)
    return {"simplices": tree.num_simplices()}


def _unchecked_malloc(then: str) -> None:
    """Native code that does not check malloc: it writes through the NULL it got (SIGSEGV) or
    gives up with abort() (SIGABRT) when the allocation fails."""
    faulthandler.disable()  # pytest's, inherited by the fork: no traceback for a planned crash
    libc = ctypes.CDLL(None)
    libc.malloc.restype = ctypes.c_void_p
    block = libc.malloc(ctypes.c_size_t(2 * LIMIT_MB * MIB))
    if block is None and then == "abort":
        libc.abort()
    ctypes.memset(block or 0, 1, 2 * LIMIT_MB * MIB)  # NULL: SIGSEGV


def _segfault_beyond(header: dict[str, Any], data: bytes, report: Report) -> dict[str, Any]:
    _unchecked_malloc("write")
    return {}


def _abort_beyond(header: dict[str, Any], data: bytes, report: Report) -> dict[str, Any]:
    _unchecked_malloc("abort")
    return {}


def _small_then_heavy(header: dict[str, Any], data: bytes, report: Report) -> dict[str, Any]:
    """A job that succeeds (the cap is only a ceiling), then the real execute path."""
    return execute_bytes(header, data, report)


@pytest.mark.parametrize(
    ("handler", "how"),
    [
        (_numpy_beyond, "an allocation failed"),
        (_gudhi_beyond, "an allocation failed"),
        (_segfault_beyond, "died of SIGSEGV"),
        (_abort_beyond, "died of SIGABRT"),
    ],
    ids=["numpy-MemoryError", "gudhi-bad_alloc", "unchecked-malloc-SIGSEGV", "abort-SIGABRT"],
)
def test_every_way_of_giving_way_is_a_memory_limit(handler: Any, how: str) -> None:
    compute = ComputeProcess(handler)
    try:
        first = compute.pid
        problem = aborted_by(compute, LIMIT_MB)
        assert problem["type"] == MEMORY_LIMIT
        assert problem["status"] == 422
        assert f"memory limit of {LIMIT_MB} MiB" in problem["detail"]
        assert how in problem["detail"]
        assert problem["memory_limit_mb"] == LIMIT_MB
        assert first is not None and not running(first)  # killed: no half-broken state
    finally:
        compute.close()


def test_the_next_job_runs_in_a_fresh_child() -> None:
    compute = ComputeProcess(_small_then_heavy)
    try:
        # H2 of 6000 points: the condensed distances alone are 6000 * 5999 / 2 float64
        # (137 MiB), and the edge arrays cut from them several times that; far over 30 MiB
        # plus the room malloc may already hold in a test process (free chunks of the main
        # arena and one 64 MiB arena heap: ~110 MiB measured after the whole suite).
        points = np.random.default_rng(1).uniform(size=(6000, 3))
        with pytest.raises(JobAborted) as aborted:
            compute.run(
                job_id="heavy",
                payload=payload(points, 30, max_dim=2),
                input_bytes=to_npy_bytes(points),
                time_limit_s=120,
                should_stop=lambda: False,
            )
        assert aborted.value.problem.type == MEMORY_LIMIT
        assert compute.pid is None
        # 3-4-5 right triangle (Pythagoras): the two points merge at distance 5.
        result = run(compute, 30)
        assert result["diagrams"][0]["pairs"] == [[0.0, 5.0], [0.0, None]]
        assert compute.pid is not None
    finally:
        compute.close()


def test_without_a_limit_a_crash_stays_a_crash() -> None:
    # Without a cap malloc succeeds; the same code then crashes only if it writes to NULL,
    # so give it one: ctypes.memset(0, ...) is a segfault whatever the limit.
    def crash(header: dict[str, Any], data: bytes, report: Report) -> dict[str, Any]:
        faulthandler.disable()
        ctypes.memset(0, 1, 8)
        return {}

    compute = ComputeProcess(crash)
    try:
        problem = aborted_by(compute, None)
        assert problem["type"] == "urn:lacuna:problem:compute-crashed"
    finally:
        compute.close()


def test_the_worker_ceiling_lowers_the_jobs_limit() -> None:
    compute = ComputeProcess(_numpy_beyond, WorkerSettings(job_memory_ceiling_mb=LIMIT_MB))
    try:
        # The job asks for 100 times the ceiling; the ceiling holds.
        problem = aborted_by(compute, 100 * LIMIT_MB)
        assert problem["type"] == MEMORY_LIMIT
        assert problem["memory_limit_mb"] == LIMIT_MB
    finally:
        compute.close()


def _random_diagram(n: int, rng: np.random.Generator) -> np.ndarray:
    births = rng.uniform(size=n)
    return np.column_stack((births, births + rng.uniform(size=n)))


def _matrix_on_two_processes(header: dict[str, Any], data: bytes, report: Report) -> dict[str, Any]:
    """A 12-diagram Wasserstein matrix (66 pairs: forked) with one pair of 3000-point
    diagrams (~300 MB of edges, measured) among small ones, on two distance processes."""
    rng = np.random.default_rng(0)
    items = [_random_diagram(3000 if k < 2 else 5, rng) for k in range(12)]
    task = DistanceTask(type="distances", metric="wasserstein", order=1.0, count=12)
    share = headroom()
    assert share is not None and share <= LIMIT_MB * MIB  # the cap is on
    matrix, _ = pairwise.distance_matrix(items, task, lambda done, total: None, processes=2)
    return {"max": float(matrix.max())}


def test_a_distance_process_beyond_its_share_fails_the_job() -> None:
    compute = ComputeProcess(_matrix_on_two_processes)
    try:
        problem = aborted_by(compute, LIMIT_MB)
        assert problem["type"] == MEMORY_LIMIT
        assert "an allocation failed" in problem["detail"]
    finally:
        compute.close()


_USE_UNDER_A_CAP = """
import os, sys, threading, time
from workers.memory import MIB, address_space_cap

CHUNK = 64 * 1024  # below malloc's mmap threshold: served from an arena


def hold(total):
    return [bytearray(CHUNK) for _ in range(total // CHUNK)]


if sys.argv[1] == "main-arena":
    room = hold(40 * MIB)
    pin = bytearray(CHUNK)  # on top of the heap: the freed 40 MiB cannot be given back
    del room
elif sys.argv[1] == "thread-arena":
    worker = threading.Thread(target=hold, args=(40 * MIB,))
    worker.start()
    worker.join()
    # join() returns once Python is done with the thread, before the thread itself has exited
    # and glibc has put its arena (40 MiB of it used once) on the free list for the main
    # thread (malloc/arena.c, arena_thread_freeres): wait until the kernel has no such task.
    while len(os.listdir("/proc/self/task")) > 1:
        time.sleep(0.001)
got, kept = 0, []
try:
    with address_space_cap(int(sys.argv[2]) * MIB):
        while got < 1024 * MIB:
            kept.append(bytearray(CHUNK))
            got += CHUNK
except MemoryError:
    pass
print(got // MIB)
"""


@pytest.mark.parametrize("room", ["none", "main-arena", "thread-arena"])
def test_room_malloc_already_holds_counts_against_the_limit(room: str) -> None:
    # Free chunks malloc kept (M_TRIM_THRESHOLD, a chunk pinning the top of the heap) and the
    # PROT_NONE reserve of an arena heap are reused without mapping, so RLIMIT_AS does not see
    # them (setrlimit(2), malloc(3) "Arena"); counted as in use, they let a job take 40-64
    # MiB more than its limit. A fresh interpreter, so this process's own heap does not count.
    done = subprocess.run(
        [sys.executable, "-c", _USE_UNDER_A_CAP, room, str(LIMIT_MB)],
        capture_output=True,
        text=True,
        timeout=60,
        check=True,
    )
    used_mb = int(done.stdout)
    # A few MiB under the limit: the interpreter's own allocations while it runs the loop.
    assert LIMIT_MB - 4 <= used_mb <= LIMIT_MB


def test_cap_is_lifted_after_the_block() -> None:
    soft, _ = resource.getrlimit(resource.RLIMIT_AS)
    with address_space_cap(16 * MIB):
        inner, _ = resource.getrlimit(resource.RLIMIT_AS)
        assert inner <= address_space() + 16 * MIB
        with pytest.raises(MemoryError):
            np.ones(4 * 16 * MIB // 8)
    assert resource.getrlimit(resource.RLIMIT_AS)[0] == soft
    assert np.ones(4 * 16 * MIB // 8).sum() == 4 * 16 * MIB // 8


_KEPT: list[bytearray] = []
"""What the first job of ``_fragments_then_new_mmap`` leaves behind in its child."""


def _fragments_then_new_mmap(header: dict[str, Any], data: bytes, report: Report) -> dict[str, Any]:
    """Uncapped: leave 80 MiB of 64 KiB free chunks, each between two kept ones, so malloc
    can neither give them back nor fit a large block in one (malloc(3): free chunks are
    reused, a block above the mmap threshold gets a mapping of its own). Capped: 4 MiB of
    new memory in one array."""
    if header["memory_limit_mb"] is None:
        chunks = [bytearray(64 * 1024) for _ in range(2 * 1280)]
        _KEPT.extend(chunks[1::2])
        del chunks
        return {"kept": len(_KEPT)}
    return {"sum": float(np.ones(4 * MIB // 8).sum())}


def test_a_child_holding_free_chunks_still_gives_a_capped_job_its_limit() -> None:
    compute = ComputeProcess(_fragments_then_new_mmap)
    try:
        assert run(compute, None) == {"kept": 1280}
        # 20 MiB of limit, 4 MiB asked: the 80 MiB malloc keeps must not make it fail.
        assert run(compute, 20) == {"sum": 4 * MIB // 8}
    finally:
        compute.close()
