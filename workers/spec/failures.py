"""Why a job failed: the problem objects (RFC 9457 shape) stored with failed jobs.

Every failure a worker can report is built here, so its ``type`` URIs form one list.
"""

from workers.spec.problems import CANCELLED_TYPE, PROBLEM_TYPE, FieldError, Problem

__all__ = [
    "cancelled",
    "computation_crashed",
    "input_corrupt",
    "input_missing",
    "internal_error",
    "invalid_parameters",
    "out_of_memory",
    "payload_invalid",
    "time_limit_exceeded",
    "worker_lost",
]

_ADVICE = "lower max_dim, set max_edge or subsample"


def time_limit_exceeded(limit_s: float) -> Problem:
    return Problem(
        type=PROBLEM_TYPE + "time-limit",
        title="Time limit exceeded",
        status=422,
        detail=f"the job ran longer than its time limit of {limit_s:g} s and was stopped; "
        + _ADVICE,
    )


def cancelled() -> Problem:
    return Problem(
        type=CANCELLED_TYPE, title="Cancelled", status=409, detail="the job was cancelled"
    )


def computation_crashed(exit_code: int | None) -> Problem:
    return Problem(
        type=PROBLEM_TYPE + "compute-crashed",
        title="Computation crashed",
        status=500,
        detail=f"the compute process ended unexpectedly (exit code {exit_code}); this often "
        "means it ran out of memory",
    )


def out_of_memory() -> Problem:
    return Problem(
        type=PROBLEM_TYPE + "out-of-memory",
        title="Out of memory",
        status=507,
        detail="the computation ran out of memory; " + _ADVICE,
    )


def invalid_parameters(message: str, pointer: str | None) -> Problem:
    return Problem(
        type=PROBLEM_TYPE + "invalid-request",
        title="Invalid request",
        status=422,
        detail=message,
        errors=[FieldError(pointer=pointer, message=message)] if pointer else None,
    )


def internal_error() -> Problem:
    return Problem(
        type=PROBLEM_TYPE + "internal-error",
        title="Internal error",
        status=500,
        detail="the computation failed unexpectedly; the worker log has the traceback",
    )


def input_missing() -> Problem:
    return Problem(
        type=PROBLEM_TYPE + "input-expired",
        title="Input expired",
        status=410,
        detail="the input of this job was no longer stored when a worker took it",
    )


def input_corrupt() -> Problem:
    return Problem(
        type=PROBLEM_TYPE + "input-corrupt",
        title="Input corrupt",
        status=500,
        detail="the stored input does not match the shape and hash recorded at submission",
    )


def payload_invalid(detail: str) -> Problem:
    return Problem(
        type=PROBLEM_TYPE + "payload-invalid",
        title="Job payload invalid",
        status=500,
        detail=f"the queued job does not match this worker's schema ({detail}); are the API "
        "and the workers the same version?",
    )


def worker_lost() -> Problem:
    return Problem(
        type=PROBLEM_TYPE + "worker-lost",
        title="Worker lost",
        status=500,
        detail="the worker stopped before the job ended (it was killed or lost)",
    )
