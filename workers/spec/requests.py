"""The body of ``POST /v1/jobs``."""

from pydantic import BaseModel, ConfigDict

from workers.spec.capabilities import Limits
from workers.spec.filtrations import Filtration
from workers.spec.inputs import Input
from workers.spec.problems import FieldError


class JobRequest(BaseModel):
    """One computation: an input and the filtration to build on it."""

    model_config = ConfigDict(extra="forbid")

    input: Input
    filtration: Filtration

    def field_errors(self, limits: Limits) -> list[FieldError]:
        """Checks that span several fields or depend on configured limits.

        Pydantic validates each field on its own; what only makes sense together (all rows of
        one length, a subsample no larger than the set, the point limit) is checked here.
        """
        points = self.input.points
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
        errors: list[FieldError] = []
        n = len(points)
        subsample = self.filtration.subsample
        if n > limits.max_input_points:
            errors.append(
                FieldError(
                    pointer="/input/points",
                    message=f"{n} points is above the limit of {limits.max_input_points} "
                    "per request",
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
        if self.filtration.max_dim > limits.max_dim:
            errors.append(
                FieldError(
                    pointer="/filtration/max_dim",
                    message=f"max_dim {self.filtration.max_dim} is above this server's limit of "
                    f"{limits.max_dim}",
                )
            )
        return errors
