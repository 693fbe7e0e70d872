"""The one table of input kinds agrees with the contract's input models, and every kind names
a worker module that exists and computes."""

import importlib
import typing

from workers.spec.inputs import Input
from workers.spec.jobs import PersistenceTask, StoredType
from workers.spec.kinds import KINDS
from workers.spec.tags import members_by_tag


def test_every_input_model_has_exactly_one_kind() -> None:
    models = members_by_tag(Input)
    assert set(models) == set(KINDS)
    for tag, model in models.items():
        assert KINDS[tag].model is model and KINDS[tag].type == tag


def test_every_kind_travels_as_a_stored_type() -> None:
    assert set(KINDS) <= set(typing.get_args(StoredType))


def test_every_kind_names_a_worker_module_that_computes() -> None:
    tasks = [
        PersistenceTask(type="persistence", filtration=None),
        PersistenceTask(type="persistence", filtration=None, skeletonize=True),
    ]
    named = {kind.worker(task) for kind in KINDS.values() for task in tasks}
    # A skeletonized mask is computed as a graph; every other kind by its own module.
    assert named == {
        "workers.jobs.points",
        "workers.jobs.labelled",
        "workers.jobs.diagrams",
        "workers.jobs.pixels",
        "workers.jobs.graphs",
    }
    for name in named:
        module = importlib.import_module(name)
        assert callable(module.compute) and callable(module.runs_inline), name
