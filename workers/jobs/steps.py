"""The steps of a persistence job, reported as each one begins.

A job is a short list of steps a practitioner can read: the filtration built, persistence
computed (one black box: nothing is guessed inside a reduction), each feature, the result;
per direction for a sweep of directions. Each kind's worker plans its own steps before its
first one begins, and ``execute`` plans the features and the result, so the total is known
before anything is reported and the bar never moves back.

Progress is ``done`` steps of ``total`` over, ``stage`` the one under way.
"""

from workers.compute import Report
from workers.spec import PersistenceTask
from workers.spec.filtrations import HeightFiltration

__all__ = ["DONE", "Steps", "feature_step_count", "ignore", "of_direction"]

DONE = "done"
"""The stage of a job whose steps are all over."""


def ignore(done: int, total: int, stage: str | None = None) -> None:
    """Progress callback of computations nobody watches."""


class Steps:
    """The steps of one job: planned first, then begun one after the other."""

    def __init__(self, report: Report, planned: int = 0) -> None:
        self._report = report
        self.total = planned
        self.begun = 0

    def plan(self, count: int) -> None:
        """Add ``count`` steps; only before the first begins (the total must not change once
        shown)."""
        if self.begun:
            raise RuntimeError("steps are planned before the first one begins")
        self.total += count

    def begin(self, stage: str) -> None:
        """The next step, ``stage``, begins: the steps before it are over. A step beyond the
        planned total is a bug of the job's plan (the bar would pass its end): RuntimeError."""
        if self.begun >= self.total:
            raise RuntimeError(
                f"step {stage!r} begins after all {self.total} planned steps have begun; "
                "plan it before the first step begins"
            )
        self._report(self.begun, self.total, stage)
        self.begun += 1

    def finish(self) -> None:
        """Every step is over."""
        self._report(self.total, self.total, DONE)


def of_direction(stage: str, index: int, count: int | None) -> str:
    """``stage`` of direction ``index`` (from 0) of ``count``, or just ``stage`` without
    several directions."""
    return stage if count is None else f"{stage}, direction {index + 1} of {count}"


def feature_step_count(task: PersistenceTask) -> int:
    """One step per feature spec, for each direction of a sweep."""
    filtration = task.filtration
    sets = 1
    if isinstance(filtration, HeightFiltration) and filtration.directions is not None:
        sets = len(filtration.unit_directions())
    return len(task.features) * sets
