"""Distance matrices fanned out over forked processes: same values, progress, no orphans."""

import os
import time

import numpy as np
import pytest

from tests.support.processes import descendants, running
from tests.support.waiting import wait_until
from workers.compute import ComputeProcess, JobAborted
from workers.core.diagram_distances import DiagramMetric, diagram_distance
from workers.jobs import execute_bytes
from workers.jobs.pairwise import distance_matrix
from workers.spec import SCHEMA_VERSION, JobPayload
from workers.spec.arrays import array_sha256, diagram_rows, to_npy_bytes
from workers.spec.jobs import DistanceTask


def diagrams(count: int, size: int, seed: int) -> list[np.ndarray]:
    """Diagrams like H1 of noisy point clouds: uniform births, exponential lifetimes."""
    rng = np.random.default_rng(seed)
    found = []
    for _ in range(count):
        births = rng.uniform(0, 1, size)
        found.append(np.column_stack([births, births + rng.exponential(0.1, size)]))
    return found


def task(metric: str, count: int, **extra: float) -> DistanceTask:
    return DistanceTask(type="distances", metric=metric, count=count, **extra)  # type: ignore[arg-type]


@pytest.mark.parametrize(
    ("metric", "extra"),
    [
        ("bottleneck", {}),
        ("wasserstein", {"order": 2.0}),
        ("sliced_wasserstein", {"directions": 7}),
    ],
)
def test_forked_matrix_equals_pair_by_pair(metric: str, extra: dict) -> None:
    items = diagrams(14, 20, seed=1)  # 91 pairs: above the fork threshold
    seen: list[tuple[int, int]] = []
    matrix, nulls = distance_matrix(
        items, task(metric, 14, **extra), lambda d, t: seen.append((d, t)), processes=2
    )
    expected = DiagramMetric(
        name=metric,  # type: ignore[arg-type]
        order=extra.get("order", 1.0),
        directions=int(extra.get("directions", 50)),
    )
    for i in range(14):
        for j in range(14):
            want = 0.0 if i == j else diagram_distance(items[i], items[j], expected)
            assert matrix[i, j] == pytest.approx(want, abs=1e-12)
    assert nulls == []
    # Progress: increasing, ending at the number of pairs.
    done = [d for d, _ in seen]
    assert done == sorted(done) and done[-1] == 91 and {t for _, t in seen} == {91}


def test_infinite_entries_are_reported_with_a_reason() -> None:
    items = [np.array([[0.0, np.inf], [0.1, 0.5]]), np.array([[0.2, 0.4]]), np.array([[0, np.inf]])]
    matrix, nulls = distance_matrix(items, task("bottleneck", 3), lambda d, t: None, processes=1)
    assert np.isinf(matrix[0, 1]) and np.isinf(matrix[1, 2])
    # Sorted births matched to sorted births (common practice): only the finite part differs.
    assert matrix[0, 2] == pytest.approx(0.2)
    assert [(n.row, n.column) for n in nulls] == [(0, 1), (1, 2)]
    assert "never die" in nulls[0].reason


def test_error_in_a_forked_process_is_raised_in_the_parent() -> None:
    items = diagrams(12, 5, seed=2)
    items[7] = np.array([[0.0, np.nan]])  # breaks the computation of every pair with 7
    before = descendants(os.getpid())  # the suite's own Redis, say
    with pytest.raises(RuntimeError):
        distance_matrix(items, task("bottleneck", 12), lambda d, t: None, processes=2)
    assert descendants(os.getpid()) == before  # every forked process was reaped


def _payload(items: list[np.ndarray], rows: np.ndarray) -> JobPayload:
    return JobPayload.model_validate(
        {
            "schema_version": SCHEMA_VERSION,
            "input": {
                "type": "diagram_set",
                "shape": list(rows.shape),
                "sha256": array_sha256(rows),
            },
            "task": {
                "type": "distances",
                "metric": "wasserstein",
                "order": 1.0,
                "count": len(items),
            },
            "request_sha256": "0" * 64,
            "time_limit_s": 60,
        }
    )


def test_progress_reaches_the_worker_and_a_kill_stops_the_forked_processes() -> None:
    items = diagrams(120, 150, seed=3)  # 7140 pairs: several seconds on 2 cores
    rows = diagram_rows([(index, pairs.tolist()) for index, pairs in enumerate(items)])
    before = descendants(os.getpid())  # the suite's own Redis, say
    compute = ComputeProcess(execute_bytes)
    progress: list[tuple[int, int]] = []
    stages: set[str | None] = set()

    def seen(done: int, total: int, stage: str | None = None) -> None:
        progress.append((done, total))
        stages.add(stage)

    started = time.monotonic()
    try:
        with pytest.raises(JobAborted) as aborted:
            compute.run(
                job_id="job",
                payload=_payload(items, rows),
                input_bytes=to_npy_bytes(rows),
                time_limit_s=60,
                on_progress=seen,
                # Stop once some pairs are done, as a cancel would.
                should_stop=lambda: (
                    any(done for done, _ in progress) or time.monotonic() - started > 30
                ),
            )
        assert aborted.value.problem.type == "urn:lacuna:problem:cancelled"
        # The total shows from the start, then pairs come in before the stop.
        assert progress[0] == (0, 7140)
        assert any(0 < done < 7140 for done, _ in progress) and stages == {"distances"}
        # The compute child and the processes it forked are all gone.
        wait_until(
            lambda: not [pid for pid in descendants(os.getpid()) - before if running(pid)],
            30,
            "the compute child and the processes it forked ended",
        )
    finally:
        compute.close()
