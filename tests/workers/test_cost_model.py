"""The committed cost model (workers/spec/cost_model.json) against fresh measurements.

Each case runs a real job (``workers.jobs.execute_bytes``, what the compute child runs) in a
process forked from a fresh interpreter and measures how far its address space grew: VmPeak
above VmSize at the start (proc(5); a forked process starts with VmPeak at its size). The
model's estimate must be within a factor 2 of it: a stale model file, or a change to the
code that doubles what a job takes, fails here. Times are not compared (tests assert no
timings; ``make estimates`` reports them).
"""

import json
import os
import subprocess
import sys
from collections.abc import Callable
from typing import Any

import numpy as np
import pytest

from service.submissions import Submission, distance_submission, job_submission, stored_input
from workers.jobs import execute_bytes
from workers.jobs.steps import ignore
from workers.memory import MIB, address_space, address_space_cap
from workers.spec import SCHEMA_VERSION, DistanceRequest, JobPayload, JobRequest
from workers.spec.arrays import array_sha256, to_npy_bytes
from workers.spec.costs import (
    COST_MODEL_PATH,
    CostModel,
    cost_model,
    distance_cost,
    persistence_cost,
)
from workers.spec.jobs import DistanceTask, PersistenceTask


def _vm_peak() -> int:
    with open("/proc/self/status", encoding="ascii") as status:
        for line in status:
            if line.startswith("VmPeak:"):
                return int(line.split()[1]) * 1024
    raise AssertionError("no VmPeak in /proc/self/status")


def _run(submission: Submission) -> None:
    payload = JobPayload(
        schema_version=SCHEMA_VERSION,
        input=stored_input(submission, array_sha256(submission.array)),
        task=submission.task,
        request_sha256="0" * 64,
        time_limit_s=600,
    )
    header = {"job_id": "measured", "payload": payload.model_dump(mode="json")}
    json.dumps(execute_bytes(header, to_npy_bytes(submission.array), ignore))


def measure_here(case: str) -> None:
    """In a fresh interpreter: run a small job of the case's kind (its lazy imports), then
    the case in a forked process, and print the bytes it grew by. A fresh interpreter, not
    a fork of the test process: free memory in a large parent's heap would hide growth."""
    small, large = CASES[case]
    _run(small())
    submission = large()
    reader, writer = os.pipe()
    pid = os.fork()
    if pid == 0:  # never returns
        code = 1
        try:
            os.close(reader)
            start = address_space()
            with address_space_cap(2048 * MIB):
                _run(submission)
            os.write(writer, str(_vm_peak() - start).encode())
            code = 0
        finally:
            os._exit(code)
    os.close(writer)
    with os.fdopen(reader, "rb") as answer:
        text = answer.read()
    _, status = os.waitpid(pid, 0)
    assert os.WIFEXITED(status) and os.WEXITSTATUS(status) == 0, status
    print(int(text))


def measured_peak(case: str) -> int:
    """Bytes the job of ``case`` grew its process by (measure_here in a subprocess)."""
    code = f"from tests.workers.test_cost_model import measure_here; measure_here({case!r})"
    done = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, timeout=600, check=True
    )
    return int(done.stdout.split()[-1])


def random_diagram(n: int, seed: int) -> list[list[float]]:
    rng = np.random.default_rng(seed)
    births = rng.uniform(size=n)
    return np.c_[births, births + rng.uniform(size=n)].tolist()


def rips(n: int, d: int, max_dim: int) -> Submission:
    points = np.random.default_rng(5).uniform(size=(n, d)).tolist()
    body = {
        "input": {"type": "points", "points": points},
        "filtration": {"type": "rips", "max_dim": max_dim},
    }
    return job_submission(JobRequest.model_validate(body))


def wasserstein(n: int, m: int) -> Submission:
    body = {"metric": "wasserstein", "diagrams": [random_diagram(n, 6), random_diagram(m, 7)]}
    return distance_submission(DistanceRequest.model_validate(body), None)


def cubical(side: int) -> Submission:
    request = JobRequest.model_validate(
        {"input": {"type": "image"}, "filtration": {"type": "cubical"}}
    )
    pixels = np.random.default_rng(8).uniform(size=(side, side))
    return job_submission(request, pixels, uploaded=True)


def estimated_peak(submission: Submission) -> float:
    task: Any = submission.task
    shape = list(submission.array.shape)
    if isinstance(task, DistanceTask):
        cost = distance_cost(submission.input_type, shape, task, submission.array, "/diagrams")
    else:
        assert isinstance(task, PersistenceTask)
        cost = persistence_cost(submission.input_type, shape, task, uploaded=True)
    return cost.peak_bytes


CASES: dict[str, tuple[Callable[[], Submission], Callable[[], Submission]]] = {
    # Sizes between the grid's points, other seeds than the grid's: (a small job of the
    # same kind, the case).
    "wasserstein-3000x3000": (lambda: wasserstein(50, 50), lambda: wasserstein(3000, 3000)),
    "wasserstein-700x5000": (lambda: wasserstein(50, 50), lambda: wasserstein(700, 5000)),
    "cubical-700^2": (lambda: cubical(32), lambda: cubical(700)),
    "rips-h1-1500x3": (lambda: rips(100, 3, 1), lambda: rips(1500, 3, 1)),
}


@pytest.mark.parametrize("case", list(CASES))
def test_the_estimated_peak_is_within_a_factor_2_of_a_measurement(case: str) -> None:
    measured = measured_peak(case)
    estimated = estimated_peak(CASES[case][1]())
    assert measured > 8 * MIB  # large enough that the floor of the model plays no part
    assert 0.5 <= estimated / measured <= 2.0, (estimated, measured)


def test_the_model_file_is_the_one_loaded_and_reports_its_fit() -> None:
    model = CostModel.model_validate_json(COST_MODEL_PATH.read_text(encoding="utf-8"))
    assert model == cost_model()
    for kind, fit in model.kinds.items():
        assert fit.fit.measured == len(fit.measurements) >= 3, kind
        assert len(fit.seconds.exponents) == len(fit.regressors) == len(fit.peak_bytes.exponents)
