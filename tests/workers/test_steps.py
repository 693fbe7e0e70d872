"""The steps a job reports: planned first, then begun one after the other."""

import pytest

from workers.jobs.steps import DONE, Steps


def test_steps_report_each_one_as_it_begins_then_done() -> None:
    reported: list[tuple[int, int, str | None]] = []
    steps = Steps(lambda done, total, stage=None: reported.append((done, total, stage)), 1)
    steps.plan(1)
    steps.begin("persistence")
    steps.begin("result")
    steps.finish()
    assert reported == [(0, 2, "persistence"), (1, 2, "result"), (2, 2, DONE)]


def test_a_step_beyond_the_planned_total_is_refused() -> None:
    reported: list[tuple[int, int, str | None]] = []
    steps = Steps(lambda done, total, stage=None: reported.append((done, total, stage)), 1)
    steps.begin("persistence")
    with pytest.raises(RuntimeError, match=r"'features' begins after all 1 planned steps"):
        steps.begin("features")
    assert reported == [(0, 1, "persistence")]  # nothing past the end was shown


def test_planning_after_the_first_step_is_refused() -> None:
    steps = Steps(lambda done, total, stage=None: None, 1)
    steps.begin("persistence")
    with pytest.raises(RuntimeError, match="planned before the first one begins"):
        steps.plan(1)
