"""What every input kind provides, and the shapes its data and its stored form take."""

import builtins
from abc import ABC, abstractmethod
from dataclasses import dataclass, field
from typing import Any, ClassVar, Generic, Literal, TypeVar, cast

import numpy as np
from pydantic import BaseModel

from workers.spec.capabilities import Limits
from workers.spec.jobs import PersistenceTask, StoredType
from workers.spec.problems import FieldError
from workers.spec.requests import JobRequest

__all__ = ["Checked", "GraphArrays", "InputData", "InputKind", "LabelledPoints", "Stored"]


@dataclass(frozen=True)
class GraphArrays:
    """A graph as arrays: ``coordinates`` (n, d) float64 as given (before spacing), ``edges``
    (m, 2) int64, optional ``radius`` (n,) and ``length`` (m,) float64."""

    coordinates: np.ndarray
    edges: np.ndarray
    radius: np.ndarray | None = None
    length: np.ndarray | None = None


@dataclass(frozen=True)
class LabelledPoints:
    """Labelled points as arrays: ``points`` (n, d) float64, ``codes`` (n,) int64 positions
    in ``classes`` (the class names, sorted), and ``centroids``: how many came from polygon
    features taken at their centroid (GeoJSON uploads)."""

    points: np.ndarray
    codes: np.ndarray
    classes: tuple[str, ...]
    centroids: int = 0


InputData = np.ndarray | GraphArrays | LabelledPoints
"""The data of an input that comes as arrays: pixels, a graph, or labelled points."""


@dataclass(frozen=True)
class Checked:
    """What a kind's checks found: the errors, and the homology dimensions the job will have
    diagrams of (None: the errors leave nothing to check features against)."""

    errors: list[FieldError]
    dims: set[int] | None = field(default_factory=set)

    @classmethod
    def stop(cls, pointer: str, message: str) -> "Checked":
        """One error that leaves nothing more to check."""
        return cls([FieldError(pointer=pointer, message=message)], None)


@dataclass(frozen=True)
class Stored:
    """How an input travels: the one array stored next to the job, its stored type, the fields
    of the task particular to the kind, a line saying what the job computes on, and fields
    the request is hashed with in place of data the array does not carry (class names)."""

    array: np.ndarray
    type: StoredType
    task: dict[str, Any]
    description: str
    described: dict[str, Any] = field(default_factory=dict)


Model = TypeVar("Model", bound=BaseModel)


class InputKind(ABC, Generic[Model]):
    """One kind of input (points, diagrams, image, mask, graph)."""

    type: ClassVar[str]
    """The input's ``type`` tag."""

    model: builtins.type[Model]
    """Its pydantic model in ``workers.spec.inputs``."""

    data_fields: ClassVar[tuple[str, ...]]
    """Fields of the model holding the data; the stored array carries them, so a request is
    hashed with them left out (its input hash stands for them)."""

    upload: ClassVar[Literal["array", "graphml", "cell_table"] | None] = None
    """What the ``data`` part of a multipart request holds for this kind (None: no upload)."""

    def given(self, request: JobRequest) -> Model:
        """The request's input, as this kind's model."""
        if not isinstance(request.input, self.model):
            raise TypeError(f"not a {self.type} input: {request.input.type}")
        return cast(Model, request.input)

    def on_graph(self, given: BaseModel) -> bool:
        """Does a job on this input work on a graph (graph outputs, graph filtrations)?"""
        return False

    def data(self, given: BaseModel) -> InputData | FieldError | None:
        """The arrays of data given as JSON (None: the kind has none, or they are uploaded),
        or a FieldError at the first ragged row."""
        return None

    @abstractmethod
    def check(
        self, request: JobRequest, data: InputData | None, uploaded: bool, limits: Limits
    ) -> Checked:
        """The input checked against its filtration, outputs and the limits."""

    @abstractmethod
    def stored(self, request: JobRequest, data: InputData | None, uploaded: bool) -> Stored:
        """The checked input as it travels to the worker."""

    @abstractmethod
    def worker(self, task: PersistenceTask) -> str:
        """Dotted name of the ``workers.jobs`` module that computes ``task`` on this input."""
