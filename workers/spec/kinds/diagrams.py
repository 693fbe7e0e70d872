"""Given diagrams: pairs a client already has, to vectorise; stored as (dim, birth, death)
rows (``workers.spec.arrays.diagram_rows``)."""

from workers.spec.arrays import diagram_rows
from workers.spec.capabilities import Limits
from workers.spec.inputs import DiagramsInput
from workers.spec.jobs import PersistenceTask
from workers.spec.kinds.base import Checked, InputData, InputKind, Stored
from workers.spec.problems import FieldError
from workers.spec.requests import JobRequest
from workers.spec.results import pair_errors

__all__ = ["DiagramsKind"]


class DiagramsKind(InputKind[DiagramsInput]):
    type = "diagrams"
    model = DiagramsInput
    data_fields = ("diagrams",)

    def check(
        self, request: JobRequest, data: InputData | None, uploaded: bool, limits: Limits
    ) -> Checked:
        given = self.given(request)
        errors: list[FieldError] = []
        if request.filtration is not None:
            errors.append(
                FieldError(
                    pointer="/filtration",
                    message="given diagrams take no filtration; leave it out",
                )
            )
        seen: set[int] = set()
        total = 0
        for index, diagram in enumerate(given.diagrams):
            if diagram.dim in seen:
                errors.append(
                    FieldError(
                        pointer=f"/input/diagrams/{index}/dim",
                        message=f"dimension {diagram.dim} is given twice; send one diagram per "
                        "dimension",
                    )
                )
            seen.add(diagram.dim)
            total += len(diagram.pairs)
            errors.extend(pair_errors(diagram.pairs, f"/input/diagrams/{index}/pairs"))
        if total > limits.max_input_points:
            errors.append(
                FieldError(
                    pointer="/input/diagrams",
                    message=f"{total} pairs is above the limit of {limits.max_input_points} "
                    "per request",
                )
            )
        return Checked(errors, seen)

    def stored(self, request: JobRequest, data: InputData | None, uploaded: bool) -> Stored:
        diagrams = self.given(request).diagrams
        array = diagram_rows([(d.dim, d.pairs) for d in diagrams])
        return Stored(
            array,
            "diagrams",
            {"given_dims": [d.dim for d in diagrams]},
            f"features of {len(array)} given pairs",
        )

    def worker(self, task: PersistenceTask) -> str:
        return "workers.jobs.diagrams"
