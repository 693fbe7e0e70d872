"""Why a job failed: the problem objects (RFC 9457 shape) stored with failed jobs.

Every failure a worker can report is built here, so its ``type`` URIs form one list.
"""

from workers.spec.problems import FieldError, Problem, problem_of_kind

__all__ = [
    "cancelled",
    "computation_crashed",
    "input_corrupt",
    "input_missing",
    "internal_error",
    "invalid_parameters",
    "memory_limit_exceeded",
    "out_of_memory",
    "payload_invalid",
    "time_limit_exceeded",
    "worker_died",
    "worker_lost",
]

_ADVICE = "lower max_dim, set max_edge or subsample"


def time_limit_exceeded(limit_s: float) -> Problem:
    return problem_of_kind(
        "time-limit",
        f"the job ran longer than its time limit of {limit_s:g} s and was stopped; " + _ADVICE,
    )


def cancelled() -> Problem:
    return problem_of_kind("cancelled", "the job was cancelled")


def computation_crashed(exit_code: int | None) -> Problem:
    return problem_of_kind(
        "compute-crashed",
        f"the compute process ended unexpectedly (exit code {exit_code}); this often "
        "means it ran out of memory",
    )


def out_of_memory() -> Problem:
    return problem_of_kind("out-of-memory", "the computation ran out of memory; " + _ADVICE)


def memory_limit_exceeded(limit_mb: int, how: str) -> Problem:
    """A job stopped by its memory limit; ``how`` says what gave way (an allocation that
    failed, or the process that died of it)."""
    return problem_of_kind(
        "memory-limit",
        f"the job needed more than its memory limit of {limit_mb} MiB and was stopped "
        f"({how}); " + _ADVICE + ", or send smaller diagrams",
        memory_limit_mb=limit_mb,
    )


def invalid_parameters(message: str, pointer: str | None) -> Problem:
    problem = problem_of_kind("invalid-request", message)
    if pointer:
        problem.errors = [FieldError(pointer=pointer, message=message)]
    return problem


def internal_error() -> Problem:
    return problem_of_kind(
        "internal-error",
        "the computation failed unexpectedly; the worker log has the traceback",
    )


def input_missing() -> Problem:
    return problem_of_kind(
        "input-expired",
        "the input of this job was no longer stored when a worker took it",
    )


def input_corrupt() -> Problem:
    return problem_of_kind(
        "input-corrupt",
        "the stored input does not match the shape and hash recorded at submission",
    )


def payload_invalid(detail: str) -> Problem:
    return problem_of_kind(
        "payload-invalid",
        f"the queued job does not match this worker's schema ({detail}); are the API "
        "and the workers the same version?",
    )


def worker_lost() -> Problem:
    return problem_of_kind(
        "worker-lost",
        "the worker stopped before the job ended (it was killed or lost)",
    )


def worker_died(worker: str, attempts: int, why: str) -> Problem:
    """The problem of a job whose worker died under it on every attempt (``why``: how that
    was seen), written by the worker that found it."""
    tries = "its only attempt" if attempts == 1 else f"each of its {attempts} attempts"
    return problem_of_kind(
        "worker-lost",
        f"the worker running this job died on {tries}, last {worker} ({why}); it is not "
        "tried again",
    )
