"""Labelled points jobs: the diagrams of a Rips filtration (``workers.jobs.points``) or a
Dowker filtration (``workers.jobs.dowker``) when the output holds "diagrams", and the cell
mixing descriptors when it holds "descriptors"."""

import dataclasses

import numpy as np

from workers.core.cell_mixing import mixing_descriptors
from workers.core.errors import pointing_into
from workers.jobs import dowker, points
from workers.jobs.results import Computed
from workers.jobs.steps import Steps
from workers.spec import JobPayload, PersistenceTask
from workers.spec.filtrations import DowkerFiltration

__all__ = ["compute", "runs_inline"]


def compute(
    payload: JobPayload, task: PersistenceTask, array: np.ndarray, steps: Steps
) -> Computed:
    """The diagrams and descriptors the task's output asks for, of the (n, d + 1) array."""
    if task.labelled is None:
        raise TypeError("a labelled points job needs its classes")
    mixing = "descriptors" in task.output
    diagrams = "diagrams" in task.output
    codes = array[:, -1].astype(np.int64)
    if diagrams:
        of_filtration = (
            dowker.compute if isinstance(task.filtration, DowkerFiltration) else points.compute
        )
        if mixing:
            steps.plan(1)
        computed = of_filtration(payload, task, array, steps)
    else:
        steps.plan(1)
        computed = Computed(
            sets=[],
            convention=None,
            coordinate_units=payload.input.units,
            engine=None,
            limit_pointer="/descriptors",
            advice="",
            diagrams_kept=False,
            fields=points.labelled_fields(codes, task.labelled, set()),
        )
    if not mixing:
        return computed
    steps.begin("descriptors")
    radii = task.descriptors.radii if task.descriptors is not None else None
    with pointing_into("/descriptors"):
        found = mixing_descriptors(array[:, :-1], codes, task.labelled.classes, radii or [])
    cell_mixing = {
        "radii": list(found.radii),
        "pairs": [
            {"source": source, "target": target, **dataclasses.asdict(summary)}
            for (source, target), summary in sorted(found.pairs.items())
        ],
    }
    with_mixing: Computed = dataclasses.replace(
        computed, fields={**computed.fields, "cell_mixing": cell_mixing}
    )
    return with_mixing


def runs_inline(payload: JobPayload) -> bool:
    """As the filtration's module says; descriptors alone on a worker, like any."""
    task = payload.task
    if not isinstance(task, PersistenceTask) or "diagrams" not in task.output:
        return False
    if isinstance(task.filtration, DowkerFiltration):
        return dowker.runs_inline(payload)
    return points.runs_inline(payload)
