"""Point sets: N x d coordinates, the Rips filtration, stored as the (n, d) float64 array."""

import numpy as np

from workers.spec.capabilities import Limits
from workers.spec.filtrations import RipsFiltration
from workers.spec.inputs import PointsInput
from workers.spec.jobs import PersistenceTask
from workers.spec.kinds.base import Checked, InputData, InputKind, Stored
from workers.spec.problems import FieldError
from workers.spec.requests import JobRequest

__all__ = ["PointsKind"]


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
    width = len(points[0])
    for row, coordinates in enumerate(points):
        if len(coordinates) != width:
            return [
                FieldError(
                    pointer=f"/input/points/{row}",
                    message=f"row {row} has {len(coordinates)} coordinates, row 0 has {width};"
                    " every row needs the same number",
                )
            ]
    if filtration is None:
        return [
            FieldError(
                pointer="/filtration",
                message='a point set needs a filtration, e.g. {"type": "rips", "max_dim": 1}',
            )
        ]
    errors: list[FieldError] = []
    n = len(points)
    subsample = filtration.subsample
    if n > limits.max_input_points:
        errors.append(
            FieldError(
                pointer="/input/points",
                message=f"{n} points is above the limit of {limits.max_input_points} per request",
            )
        )
    elif subsample is None and n > limits.max_points:
        errors.append(
            FieldError(
                pointer="/input/points",
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
    if filtration.max_dim > limits.max_dim:
        errors.append(
            FieldError(
                pointer="/filtration/max_dim",
                message=f"max_dim {filtration.max_dim} is above this server's limit of "
                f"{limits.max_dim}",
            )
        )
    return errors
