"""Labelled points: 2D or 3D points each of one class, from JSON or an uploaded CSV or GeoJSON
table, for the Rips filtration on all of them or on one population, the Dowker filtration of
one class witnessed by another, and cross-population descriptors (output "descriptors").

Stored as one (n, d + 1) float64 array: the coordinates, then the position of the point's
class among the class names sorted (exact in float64: at most ``max_label_classes``). The
names travel in the task (``LabelledLayout``) and are hashed with the request, so the input
hash covers which points share a class and the request hash what the classes are called.
"""

from collections.abc import Sequence

import numpy as np
from pydantic import BaseModel

from workers.spec.capabilities import Limits
from workers.spec.filtrations import DowkerFiltration, RipsFiltration
from workers.spec.inputs import LabelledPointsInput
from workers.spec.jobs import LabelledLayout, PersistenceTask
from workers.spec.kinds.base import Checked, InputData, InputKind, LabelledPoints, Stored
from workers.spec.kinds.points import max_dim_errors, ragged_row, rips_errors
from workers.spec.problems import FieldError
from workers.spec.requests import JobRequest

__all__ = ["LabelledPointsKind", "labelled_points_of"]

UPLOAD_POINTER = "/data"


def labelled_points_of(
    points: Sequence[Sequence[float]] | np.ndarray, labels: Sequence[str], centroids: int = 0
) -> LabelledPoints:
    """Points and their labels as arrays, the classes numbered in sorted order of names."""
    classes, codes = np.unique(np.asarray(labels, dtype=object).astype(str), return_inverse=True)
    return LabelledPoints(
        points=np.asarray(points, dtype=np.float64).reshape(len(labels), -1),
        codes=codes.astype(np.int64).reshape(-1),
        classes=tuple(str(name) for name in classes),
        centroids=centroids,
    )


def _mixing_errors(request: JobRequest, data: LabelledPoints) -> list[FieldError]:
    """What is wrong with asking for the cell mixing descriptors of ``data``: they need two
    classes and radii, positive and increasing, and take none of a graph's options."""
    options = request.descriptors
    if options is None or options.radii is None:
        return [
            FieldError(
                pointer="/descriptors/radii",
                message='the descriptors of labelled points need radii, e.g. "descriptors": '
                '{"radii": [10, 20]}',
            )
        ]
    for name in ("direction", "shells"):
        if getattr(options, name) is not None:
            return [
                FieldError(
                    pointer=f"/descriptors/{name}",
                    message=f"{name} is for graph descriptors; labelled points take radii",
                )
            ]
    if len(data.classes) < 2:
        return [
            FieldError(
                pointer="/output",
                message=f'every point is of class "{data.classes[0]}"; the descriptors compare '
                "classes and need two",
            )
        ]
    for index in range(1, len(options.radii)):
        if options.radii[index] <= options.radii[index - 1]:
            return [
                FieldError(
                    pointer=f"/descriptors/radii/{index}",
                    message="radii must increase: each above the one before",
                )
            ]
    return []


class LabelledPointsKind(InputKind[LabelledPointsInput]):
    """Points of several classes (cell populations); the Rips filtration on all of them, or on
    the class its ``population`` names; the Dowker filtration of two classes; the cell mixing
    descriptors."""

    type = "labelled_points"
    model = LabelledPointsInput
    data_fields = ("points", "labels")
    upload = "cell_table"

    def data(self, given: BaseModel) -> InputData | FieldError | None:
        if not isinstance(given, LabelledPointsInput) or given.points is None:
            return None
        points = given.points
        if not points:
            return FieldError(pointer="/input/points", message="give at least one point")
        ragged = ragged_row("/input/points", points)
        if ragged is not None:
            return ragged
        labels = given.labels
        if labels is None or len(labels) != len(points):
            return FieldError(
                pointer="/input/labels",
                message=f"labels has {'no' if labels is None else len(labels)} values for "
                f"{len(points)} points; give one class per point",
            )
        return labelled_points_of(points, labels)

    def check(
        self, request: JobRequest, data: InputData | None, uploaded: bool, limits: Limits
    ) -> Checked:
        given = self.given(request)
        if uploaded and (given.points is not None or given.labels is not None):
            field = "points" if given.points is not None else "labels"
            return Checked.stop(
                f"/input/{field}",
                "the points are both in the request and uploaded as the data part; send them "
                "one way",
            )
        if not uploaded and given.format is not None:
            return Checked.stop(
                "/input/format",
                "format says what an uploaded data part holds; send the table as the data "
                "part of a multipart/form-data request, or the points and labels as JSON",
            )
        if not isinstance(data, LabelledPoints):
            return Checked.stop(
                "/input/points",
                "give points and labels, or upload a CSV or GeoJSON table as the data part of "
                'a multipart/form-data request (with "format")',
            )
        where = UPLOAD_POINTER if uploaded else "/input/labels"
        if len(data.classes) > limits.max_label_classes:
            return Checked.stop(
                where,
                f"the points have {len(data.classes)} classes, above the limit of "
                f"{limits.max_label_classes}",
            )
        mixing = _mixing_errors(request, data) if "descriptors" in request.output else []
        if mixing:
            return Checked(mixing, None)
        filtration = request.filtration
        if filtration is None:
            if "diagrams" not in request.output:  # descriptors alone
                return Checked([], set())
            return Checked.stop(
                "/filtration",
                'labelled points need a filtration, e.g. {"type": "rips", "population": '
                f'"{data.classes[0]}"}}',
            )
        if isinstance(filtration, DowkerFiltration):
            return self._dowker_checked(data, filtration, uploaded, limits)
        if not isinstance(filtration, RipsFiltration):
            return Checked.stop(
                "/filtration/type",
                f'labelled points take the "rips" or "dowker" filtration, not "{filtration.type}"',
            )
        computed = len(data.points)
        if filtration.population is not None:
            if filtration.population not in data.classes:
                return Checked.stop(
                    "/filtration/population",
                    f'no point is of class "{filtration.population}"; the classes are '
                    + ", ".join(f'"{name}"' for name in data.classes),
                )
            position = data.classes.index(filtration.population)
            computed = int(np.count_nonzero(data.codes == position))
        points_pointer = UPLOAD_POINTER if uploaded else "/input/points"
        errors = rips_errors(len(data.points), computed, filtration, limits, points_pointer)
        return Checked(errors, set(range(filtration.max_dim + 1)))

    def _dowker_checked(
        self, data: LabelledPoints, filtration: DowkerFiltration, uploaded: bool, limits: Limits
    ) -> Checked:
        """The checks of a Dowker filtration: two distinct classes the points have, neither
        empty (its size is checked by the worker, which has the points' neighbours)."""
        known = ", ".join(f'"{name}"' for name in data.classes)
        for role in ("vertices", "witnesses"):
            name = getattr(filtration, role)
            if name not in data.classes:
                return Checked.stop(
                    f"/filtration/{role}",
                    f'no point is of class "{name}"; the classes are {known}',
                )
        if filtration.vertices == filtration.witnesses:
            return Checked.stop(
                "/filtration/witnesses",
                f'the witnesses are the class of the vertices ("{filtration.vertices}"); name '
                f"another of {known}",
            )
        errors = []
        if len(data.points) > limits.max_input_points:
            errors.append(
                FieldError(
                    pointer=UPLOAD_POINTER if uploaded else "/input/points",
                    message=f"{len(data.points)} points is above the limit of "
                    f"{limits.max_input_points} per request",
                )
            )
        errors += max_dim_errors(filtration.max_dim, limits)
        return Checked(errors, set(range(filtration.max_dim + 1)))

    def stored(self, request: JobRequest, data: InputData | None, uploaded: bool) -> Stored:
        if not isinstance(data, LabelledPoints):
            raise TypeError("a labelled points job needs its checked arrays")
        array = np.column_stack([data.points, data.codes.astype(np.float64)])
        layout = LabelledLayout(classes=list(data.classes), centroids=data.centroids)
        filtration = request.filtration
        if isinstance(filtration, DowkerFiltration):
            on = f'class "{filtration.vertices}" witnessed by "{filtration.witnesses}"'
        elif isinstance(filtration, RipsFiltration) and filtration.population is not None:
            on = f'class "{filtration.population}"'
        else:
            on = "all classes"
        n, d = data.points.shape
        return Stored(
            array,
            "labelled_points",
            {"labelled": layout},
            f"{request.filtration_name()} on {n} x {d} labelled points ({on})",
            {"classes": list(data.classes)},
        )

    def worker(self, task: PersistenceTask) -> str:
        return "workers.jobs.labelled"
