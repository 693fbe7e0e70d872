"""Distance matrices: every pair of diagrams (or vectors), on all cores, with progress.

Pairs are split into chunks; with more than one core, forked processes take chunks in turn
and send each chunk's values back over a pipe as raw float64 bytes (nothing is pickled). The
children inherit the diagrams through fork and die with their parent (PR_SET_PDEATHSIG), so
killing a job's compute process stops them too.

Under a job's memory limit (``workers.memory``) each forked process keeps an equal share of
the headroom the compute process had left, so together they stay within the limit. An
allocation that fails in one, or its death by a signal native code dies of when an
allocation fails, is raised in the compute process as ``MemoryError``.
"""

import ctypes
import json
import os
import signal
from collections.abc import Callable, Sequence
from multiprocessing.connection import Connection, Pipe, wait

import numpy as np

from workers import defaults, memory
from workers.core.diagram_distances import (
    DiagramMetric,
    distances_for_pairs,
    essential_counts,
    vector_distance_matrix,
)
from workers.spec.distances import DEFAULT_DIRECTIONS, NullEntry
from workers.spec.jobs import DistanceTask

__all__ = ["PairsDone", "distance_matrix", "usable_cores"]

PairsDone = Callable[[int, int], None]
"""Called with (done, total) pairs of items as chunks finish; the distance job turns it into
its progress (``workers.compute.Report``)."""

_FAILED = (1 << 63) - 1
"""Chunk index that marks an error message instead of values."""

_OUT_OF_MEMORY = _FAILED - 1
"""Chunk index that marks a MemoryError in a distance process."""

_PR_SET_PDEATHSIG = 1


def usable_cores() -> int:
    """Cores this process may run on."""
    return len(os.sched_getaffinity(0))


def distance_matrix(
    items: Sequence[np.ndarray], task: DistanceTask, report: PairsDone, processes: int
) -> tuple[np.ndarray, list[NullEntry]]:
    """(N, N) distances of ``items`` under ``task``'s metric (nan: undefined, inf: infinite),
    and the reason for each entry that is not finite, above the diagonal."""
    count = len(items)
    if task.metric in ("euclidean", "cosine"):
        matrix = vector_distance_matrix(np.asarray(items), task.metric)
        report(count * (count - 1) // 2, count * (count - 1) // 2)
        return matrix, _vector_nulls(matrix)
    metric = DiagramMetric(
        name=task.metric,  # type: ignore[arg-type]  # a diagram metric: checked at submission
        order=task.order or 1.0,
        directions=task.directions or DEFAULT_DIRECTIONS,
        never_dying=task.never_dying.mode if task.never_dying else "separate",
        cap=task.never_dying.cap if task.never_dying else None,
    )
    rows, cols = np.triu_indices(count, k=1)

    def compute(chunk: np.ndarray) -> np.ndarray:
        return distances_for_pairs(items, rows[chunk], cols[chunk], metric)

    values = _fan_out(compute, len(rows), processes, report)
    matrix = np.zeros((count, count))
    matrix[rows, cols] = values
    matrix[cols, rows] = values
    separate = metric.never_dying == "separate"
    counts = essential_counts(items) if separate else np.zeros(count, dtype=np.int64)
    return matrix, _diagram_nulls(matrix, counts)


def _diagram_nulls(matrix: np.ndarray, essential: np.ndarray) -> list[NullEntry]:
    return [
        NullEntry(row=int(i), column=int(j), reason=_diagram_reason(i, j, essential))
        for i, j in zip(*np.nonzero(np.triu(~np.isfinite(matrix), k=1)), strict=True)
    ]


def _diagram_reason(i: int, j: int, essential: np.ndarray) -> str:
    if essential[i] != essential[j]:
        return (
            f"diagram {i} has {essential[i]} classes that never die and diagram {j} has "
            f"{essential[j]}; such classes are matched only to each other, so the distance is "
            'infinite (never_dying {"mode": "drop"} or {"mode": "cap", "cap": c} gives a '
            "finite one)"
        )
    return "the distance is beyond the range of float64"


def _vector_nulls(matrix: np.ndarray) -> list[NullEntry]:
    return [
        NullEntry(
            row=int(i),
            column=int(j),
            reason="a vector of all zeros has no direction, so the cosine distance is undefined"
            if np.isnan(matrix[i, j])
            else "the distance is beyond the range of float64",
        )
        for i, j in zip(*np.nonzero(np.triu(~np.isfinite(matrix), k=1)), strict=True)
    ]


def _fan_out(
    compute: Callable[[np.ndarray], np.ndarray], total: int, processes: int, report: PairsDone
) -> np.ndarray:
    """compute(indices) over 0..total-1 in chunks, on up to ``processes`` forked processes."""
    chunks = np.array_split(np.arange(total), max(1, -(-total // defaults.CHUNK_PAIRS)))
    values = np.empty(total)
    done = 0
    report(done, total)  # the job shows its total from the start
    if processes <= 1 or total < defaults.FORK_FROM_PAIRS:
        for chunk in chunks:
            values[chunk] = compute(chunk)
            done += len(chunk)
            report(done, total)
        return values
    processes = min(processes, len(chunks))
    capped = memory.headroom() is not None
    children: list[tuple[int, Connection]] = []
    try:
        for rank in range(processes):
            receiver, sender = Pipe(duplex=False)
            pid = os.fork()
            if pid == 0:  # the child: never returns
                receiver.close()
                memory.split_cap(processes)
                mine = [(index, chunks[index]) for index in range(rank, len(chunks), processes)]
                _serve_chunks(compute, mine, sender)
            sender.close()
            children.append((pid, receiver))
        open_ends = {receiver: pid for pid, receiver in children}
        while open_ends:
            for ready in wait(list(open_ends)):
                assert isinstance(ready, Connection)
                try:
                    message = ready.recv_bytes()
                except EOFError:
                    del open_ends[ready]
                    continue
                index = int.from_bytes(message[:8], "little")
                if index == _OUT_OF_MEMORY:
                    raise MemoryError(json.loads(message[8:])["error"])
                if index == _FAILED:
                    raise RuntimeError(json.loads(message[8:])["error"])
                chunk = chunks[index]
                values[chunk] = np.frombuffer(message[8:], dtype="<f8")
                done += len(chunk)
                report(done, total)
        if done != total:
            died = _died_of_memory(children) if capped else None
            if died is not None:
                raise MemoryError(f"a distance process died of {died} under the memory limit")
            raise RuntimeError("a distance process ended before sending all its values")
        return values
    finally:
        for pid, receiver in children:
            receiver.close()
            if pid < 0:
                continue
            try:
                os.kill(pid, signal.SIGKILL)  # a no-op for one that has exited
            except ProcessLookupError:
                pass
            os.waitpid(pid, 0)


def _died_of_memory(children: list[tuple[int, Connection]]) -> str | None:
    """The signal a child died of, if one died as native code does when an allocation
    fails. Every pipe has closed, so every child has ended or is ending: reap them all."""
    for position, (pid, receiver) in enumerate(children):
        _, status = os.waitpid(pid, 0)
        children[position] = (-1, receiver)  # reaped: not to be killed or waited for again
        if os.WIFSIGNALED(status) and os.WTERMSIG(status) in memory.MEMORY_SIGNALS:
            return signal.Signals(os.WTERMSIG(status)).name
    return None


def _serve_chunks(
    compute: Callable[[np.ndarray], np.ndarray],
    chunks: list[tuple[int, np.ndarray]],
    sender: Connection,
) -> None:
    """In a forked child: compute every chunk, send each as (index, float64 bytes), exit."""
    code = 0
    try:
        ctypes.CDLL(None, use_errno=True).prctl(_PR_SET_PDEATHSIG, signal.SIGKILL)
        signal.signal(signal.SIGINT, signal.SIG_IGN)
        for index, chunk in chunks:
            values = np.ascontiguousarray(compute(chunk), dtype="<f8")
            sender.send_bytes(index.to_bytes(8, "little") + values.tobytes())
    except BaseException as error:  # reported to the parent, which raises it
        code = 1
        marker = _OUT_OF_MEMORY if isinstance(error, MemoryError) else _FAILED
        text = json.dumps({"error": f"{type(error).__name__}: {error}"}).encode()
        sender.send_bytes(marker.to_bytes(8, "little") + text)
    finally:
        sender.close()
        os._exit(code)
