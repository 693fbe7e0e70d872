"""Jobs on given diagrams: the stored (dim, birth, death) rows, sorted, empty bars dropped,
for their feature vectors."""

import numpy as np

from workers import defaults
from workers.core.diagrams import drop_empty_bars, sort_pairs
from workers.jobs.results import Computed, DiagramSet
from workers.jobs.steps import Steps
from workers.spec import JobPayload, PersistenceTask
from workers.spec.arrays import diagrams_of_rows
from workers.spec.features import vector_length

__all__ = ["compute", "runs_inline"]


def compute(
    payload: JobPayload, task: PersistenceTask, array: np.ndarray, steps: Steps
) -> Computed:
    steps.plan(1)
    steps.begin("diagrams")
    given = diagrams_of_rows(array, sorted(task.given_dims))
    diagrams = {dim: sort_pairs(drop_empty_bars(pairs)) for dim, pairs in given.items()}
    return Computed(
        sets=[DiagramSet(diagrams)],
        convention=None,
        coordinate_units=None,
        engine=None,
        given_units=payload.input.units,
        limit_pointer="/input/diagrams",
        advice="send fewer pairs",
    )


def runs_inline(payload: JobPayload) -> bool:
    task = payload.task
    if not isinstance(task, PersistenceTask):
        return False
    values = sum(vector_length(spec) for spec in task.features)
    return (
        payload.input.shape[0] <= defaults.INLINE_MAX_PAIRS and values <= defaults.INLINE_MAX_VALUES
    )
