"""Point sets: N x d coordinates, the Rips filtration, stored as the (n, d) float64 array."""

from collections.abc import Sequence

import numpy as np

from workers.spec.capabilities import Limits
from workers.spec.filtrations import RipsFiltration
from workers.spec.inputs import PointsInput
from workers.spec.jobs import PersistenceTask
from workers.spec.kinds.base import Checked, InputData, InputKind, Stored
from workers.spec.problems import FieldError
from workers.spec.requests import JobRequest

__all__ = ["PointsKind", "ragged_row", "rips_errors"]


class PointsKind(InputKind[PointsInput]):
    type = "points"
    model = PointsInput
    data_fields = ("points",)

    def check(
        self, request: JobRequest, data: InputData | None, uploaded: bool, limits: Limits
    ) -> Checked:
        filtration = request.filtration
        if filtration is not None and not isinstance(filtration, RipsFiltration):
            return Checked(
                [
                    FieldError(
                        pointer="/filtration/type",
                        message=f'a point set takes the "rips" filtration, not "{filtration.type}"',
                    )
                ],
                None,
            )
        if filtration is not None and filtration.population is not None:
            return Checked.stop(
                "/filtration/population",
                'population chooses a class of "labelled_points"; a "points" input has none',
            )
        errors = _point_errors(self.given(request), filtration, limits)
        return Checked(errors, set(range(filtration.max_dim + 1)) if filtration else set())

    def stored(self, request: JobRequest, data: InputData | None, uploaded: bool) -> Stored:
        array = np.asarray(self.given(request).points, dtype=np.float64)
        name = request.filtration_name()
        return Stored(array, "points", {}, f"{name} on {array.shape[0]} x {array.shape[1]}")

    def worker(self, task: PersistenceTask) -> str:
        return "workers.jobs.points"


def _point_errors(
    points_input: PointsInput, filtration: RipsFiltration | None, limits: Limits
) -> list[FieldError]:
    points = points_input.points
    ragged = ragged_row("/input/points", points)
    if ragged is not None:
        return [ragged]
    if filtration is None:
        return [
            FieldError(
                pointer="/filtration",
                message='a point set needs a filtration, e.g. {"type": "rips", "max_dim": 1}',
            )
        ]
    return rips_errors(len(points), len(points), filtration, limits, "/input/points")


def ragged_row(
    pointer: str, rows: Sequence[Sequence[float]], what: str = "row"
) -> FieldError | None:
    """A FieldError at the first of ``rows`` (each a ``what``) whose length differs from the
    first's."""
    width = len(rows[0])
    for row, coordinates in enumerate(rows):
        if len(coordinates) != width:
            return FieldError(
                pointer=f"{pointer}/{row}",
                message=f"{what} {row} has {len(coordinates)} coordinates, {what} 0 has "
                f"{width}; every {what} needs the same number",
            )
    return None


def rips_errors(
    given: int, computed: int, filtration: RipsFiltration, limits: Limits, pointer: str
) -> list[FieldError]:
    """What is wrong with a Rips filtration on ``computed`` of ``given`` points (fewer: a
    population of labelled points) against the limits; ``pointer``: where the points are."""
    errors: list[FieldError] = []
    n = computed
    subsample = filtration.subsample
    if given > limits.max_input_points:
        errors.append(
            FieldError(
                pointer=pointer,
                message=f"{given} points is above the limit of {limits.max_input_points} per "
                "request",
            )
        )
    elif subsample is None and n > limits.max_points:
        errors.append(
            FieldError(
                pointer=pointer,
                message=f"{n} points is above the Rips limit of {limits.max_points}; send "
                f'"filtration": {{"subsample": {{"method": "maxmin", "size": '
                f"{limits.max_points}}}}} to reduce the set first",
            )
        )
    if subsample is not None:
        if subsample.size > n:
            errors.append(
                FieldError(
                    pointer="/filtration/subsample/size",
                    message=f"subsample size {subsample.size} is larger than the {n} points",
                )
            )
        elif subsample.size > limits.max_points:
            errors.append(
                FieldError(
                    pointer="/filtration/subsample/size",
                    message=f"subsample size {subsample.size} is above the Rips limit of "
                    f"{limits.max_points}",
                )
            )
    return errors + max_dim_errors(filtration.max_dim, limits)


def max_dim_errors(max_dim: int, limits: Limits) -> list[FieldError]:
    """The filtration's ``max_dim`` against this server's limit."""
    if max_dim <= limits.max_dim:
        return []
    return [
        FieldError(
            pointer="/filtration/max_dim",
            message=f"max_dim {max_dim} is above this server's limit of {limits.max_dim}",
        )
    ]
