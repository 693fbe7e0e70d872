"""One mapping of problems to statuses (workers.spec.problems.PROBLEM_KINDS), used by the
HTTP answers and by failed jobs alike."""

import inspect

from service import errors, problems
from workers.spec import failures
from workers.spec.problems import PROBLEM_KINDS, PROBLEM_TYPE


def test_every_service_error_has_a_kind_of_the_table() -> None:
    raised = {
        cls
        for _, cls in inspect.getmembers(errors, inspect.isclass)
        if issubclass(cls, errors.ServiceError) and cls is not errors.ServiceError
    }
    assert raised == set(problems._KINDS)
    assert set(problems._KINDS.values()) <= set(PROBLEM_KINDS)


def test_every_job_failure_takes_status_and_title_from_the_table() -> None:
    made = [
        failures.time_limit_exceeded(1.0),
        failures.cancelled(),
        failures.computation_crashed(-9),
        failures.out_of_memory(),
        failures.memory_limit_exceeded(1024, "an allocation failed"),
        failures.invalid_parameters("bad", "/filtration"),
        failures.internal_error(),
        failures.input_missing(),
        failures.input_corrupt(),
        failures.payload_invalid("2 errors"),
        failures.worker_lost(),
        failures.worker_died("worker-1", 2, "no heartbeat for over 30 s"),
    ]
    assert len(made) == len(failures.__all__)  # every builder is called above
    for problem in made:
        kind = problem.type.removeprefix(PROBLEM_TYPE)
        # RFC 9457 section 3.1: the status and title of a problem type do not vary.
        assert (problem.status, problem.title) == PROBLEM_KINDS[kind]


def test_statuses_are_http_error_statuses() -> None:
    # RFC 9110 section 15: 4xx client errors, 5xx server errors.
    assert all(400 <= status < 600 for status, _ in PROBLEM_KINDS.values())
