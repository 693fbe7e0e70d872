"""One error contract: every pointer an error carries is a JSON Pointer (RFC 6901) into the
document it came from.

- In the numerical core, the demo generators and the pictures, a raise names the culprit
  among the arguments of the function that raises it: ``field="/sigma"`` in a function with a
  ``sigma`` parameter.
- In the job room (``workers/jobs``), a raise points into the job's request: its first token
  is a field of the request model (``/filtration``, ``/features``, ...), and a core error is
  carried into the request by ``pointing_into``.

The raise sites are found in the source, so a new one is checked without a new test.
"""

import ast
from pathlib import Path

import pytest

from tests.support.pointers import resolves
from workers.core.errors import CoreError, ParameterError, RequestError, pointing_into
from workers.spec import DistanceRequest, JobRequest
from workers.spec.plots import PlotQuery

WORKERS = Path(__file__).resolve().parents[2] / "workers"
ARGUMENT_ROOMS = ("core", "scenario", "pictures")
REQUEST_FIELDS = {
    *JobRequest.model_fields,
    *DistanceRequest.model_fields,
    *PlotQuery.model_fields,
}


POINTER_KEYWORDS = ("field", "limit_pointer")
"""Keywords whose value is a pointer: an error's field, a job result's pointer for size."""


def _raise_sites(folder: Path) -> list[tuple[str, ast.FunctionDef, ast.expr]]:
    """(where, enclosing function, pointer expression) of every pointer given to a call under
    ``folder``: ``field=`` and ``limit_pointer=`` keywords, both branches of a conditional
    one, and the prefix and renamed pointers of ``pointing_into``."""
    sites = []
    for path in sorted(folder.rglob("*.py")):
        if path == WORKERS / "core" / "errors.py":
            continue  # where pointers are carried into requests, not raised
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for function in ast.walk(tree):
            if not isinstance(function, ast.FunctionDef):
                continue
            for node in ast.walk(function):
                if not isinstance(node, ast.Call):
                    continue
                where = f"{path.relative_to(WORKERS.parent)}:{node.lineno}"
                values = [k.value for k in node.keywords if k.arg in POINTER_KEYWORDS]
                if isinstance(node.func, ast.Name) and node.func.id == "pointing_into":
                    values += node.args[:1]
                    renames = node.args[1:2]
                    if renames and isinstance(renames[0], ast.Dict):
                        values += renames[0].values
                while any(isinstance(value, ast.IfExp) for value in values):
                    values = [
                        part
                        for value in values
                        for part in (
                            (value.body, value.orelse) if isinstance(value, ast.IfExp) else (value,)
                        )
                    ]
                sites.extend((where, function, value) for value in values)
    return sites


def _literal_head(value: ast.expr) -> str | None:
    """The pointer's literal start (up to its second "/"), if the expression has one."""
    if isinstance(value, ast.Constant) and isinstance(value.value, str):
        text = value.value
    elif (
        isinstance(value, ast.JoinedStr)
        and value.values
        and isinstance(value.values[0], ast.Constant)
        and isinstance(value.values[0].value, str)
    ):
        text = value.values[0].value
    else:
        return None
    return text


def _parameters(function: ast.FunctionDef) -> set[str]:
    arguments = function.args
    every = [*arguments.posonlyargs, *arguments.args, *arguments.kwonlyargs]
    return {argument.arg for argument in every}


def test_the_sites_are_found() -> None:
    # The AST walk finds the raise sites at all (a broken walk would pass everything).
    assert len(_raise_sites(WORKERS / "core")) >= 30
    assert len(_raise_sites(WORKERS / "jobs")) >= 3


@pytest.mark.parametrize("room", ARGUMENT_ROOMS)
def test_core_pointers_name_an_argument_of_the_raising_function(room: str) -> None:
    wrong = []
    for where, function, value in _raise_sites(WORKERS / room):
        if isinstance(value, ast.Name) and value.id in _parameters(function):
            continue  # passed on from the caller, which the caller's own site checks
        text = _literal_head(value)
        if text is None or not text.startswith("/"):
            wrong.append(f"{where}: not a pointer literal")
            continue
        head = text[1:].split("/", 1)[0]
        if head and "{" not in head and head not in _parameters(function):
            wrong.append(f"{where}: /{head} is not a parameter of {function.name}")
    assert wrong == []


def test_job_pointers_start_at_a_request_field() -> None:
    wrong = []
    for where, _function, value in _raise_sites(WORKERS / "jobs"):
        if isinstance(value, ast.Name):
            continue  # a variable is not followed; the API tests check those pointers
        text = _literal_head(value)
        if text == "":
            continue  # the root: the arguments are the request's own top-level fields
        if text is None or not text.startswith("/"):
            wrong.append(f"{where}: not a pointer literal")
            continue
        head = text[1:].split("/", 1)[0]
        if head not in REQUEST_FIELDS:
            wrong.append(f"{where}: /{head} is not a field of a request")
    assert wrong == []


def test_the_core_never_raises_request_errors() -> None:
    # Only the job room knows the request; the core names its own arguments.
    for room in ARGUMENT_ROOMS:
        for path in (WORKERS / room).rglob("*.py"):
            if path == WORKERS / "core" / "errors.py":
                continue  # where the tree is defined
            text = path.read_text(encoding="utf-8")
            assert "RequestError" not in text and "pointing_into" not in text, path


def test_pointing_into_renames_the_argument_or_puts_it_under_the_prefix() -> None:
    request = {"features": [{"type": "summary", "infinite": "drop", "order": 0}]}
    with pytest.raises(RequestError) as caught:
        with pointing_into("/features/0", {"/pairs": "/features/0/infinite"}):
            raise ParameterError("order must be > 0", field="/order")
    assert caught.value.field == "/features/0/order" and resolves(request, caught.value.field)
    with pytest.raises(RequestError) as caught:  # a place inside an argument means nothing
        with pointing_into("/features/0", {"/pairs": "/features/0/infinite"}):  # in the request
            raise ParameterError("needs finite deaths", field="/pairs/3/1")
    assert caught.value.field == "/features/0/infinite" and resolves(request, caught.value.field)
    with pytest.raises(RequestError) as caught:  # about no argument: points nowhere
        with pointing_into("/features/0"):
            raise CoreError("no field")
    assert caught.value.field is None
