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


def _problem(kind: str, title: str, status: int, detail: str) -> Problem:
    return Problem(type=PROBLEM_TYPE + kind, title=title, status=status, detail=detail)


def time_limit_exceeded(limit_s: float) -> Problem:
    return _problem(
        "time-limit",
        "Time limit exceeded",
        422,
        f"the job ran longer than its time limit of {limit_s:g} s and was stopped; " + _ADVICE,
    )


def cancelled() -> Problem:
    return Problem(
        type=CANCELLED_TYPE, title="Cancelled", status=409, detail="the job was cancelled"
    )


def computation_crashed(exit_code: int | None) -> Problem:
    return _problem(
        "compute-crashed",
        "Computation crashed",
        500,
        f"the compute process ended unexpectedly (exit code {exit_code}); this often "
        "means it ran out of memory",
    )


def out_of_memory() -> Problem:
    return _problem(
        "out-of-memory", "Out of memory", 507, "the computation ran out of memory; " + _ADVICE
    )


def invalid_parameters(message: str, pointer: str | None) -> Problem:
    problem = _problem("invalid-request", "Invalid request", 422, message)
    if pointer:
        problem.errors = [FieldError(pointer=pointer, message=message)]
    return problem


def internal_error() -> Problem:
    return _problem(
        "internal-error",
        "Internal error",
        500,
        "the computation failed unexpectedly; the worker log has the traceback",
    )


def input_missing() -> Problem:
    return _problem(
        "input-expired",
        "Input expired",
        410,
        "the input of this job was no longer stored when a worker took it",
    )


def input_corrupt() -> Problem:
    return _problem(
        "input-corrupt",
        "Input corrupt",
        500,
        "the stored input does not match the shape and hash recorded at submission",
    )


def payload_invalid(detail: str) -> Problem:
    return _problem(
        "payload-invalid",
        "Job payload invalid",
        500,
        f"the queued job does not match this worker's schema ({detail}); are the API "
        "and the workers the same version?",
    )


def worker_lost() -> Problem:
    return _problem(
        "worker-lost",
        "Worker lost",
        500,
        "the worker stopped before the job ended (it was killed or lost)",
    )
