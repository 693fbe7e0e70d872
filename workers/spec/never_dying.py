"""Classes that never die (death null): the one rule feature specs and distances share.

Either leaves them out ("drop") or ends them at a cap value ("cap": a class born at b dies
at max(b, cap), so one born at or after the cap has zero persistence and is left out, as
``workers.core.diagrams.finite_part`` computes for both); distances can also match them only
to each other ("separate"). The choice travels in two wire formats: a feature spec carries it
as its own fields ``infinite`` and ``cap`` (part of the canonical JSON that spec_ids hash, so
they keep their names and place), a distance request as the object ``never_dying``
``{"mode", "cap"}``. Both state and check the rule with the helpers here.
"""

from typing import Annotated, Any

from pydantic import Field

from workers.spec.numbers import Coordinate

__all__ = ["Cap", "cap_rule", "checked_cap"]

Cap = Annotated[
    Coordinate | None,
    Field(
        validate_default=True,
        description="Death given to classes that never die, in the units of the diagram "
        'values; required with "cap", and only then.',
    ),
]
"""The cap field of either format (default None, checked by ``checked_cap``)."""


def cap_rule(mode_field: str) -> dict[str, Any]:
    """JSON Schema of a model whose ``mode_field`` says what to do with classes that never
    die: ``cap`` is a number when it is "cap", and null otherwise (``checked_cap``)."""
    return {
        "if": {"required": [mode_field], "properties": {mode_field: {"const": "cap"}}},
        "then": {"required": ["cap"], "properties": {"cap": {"type": "number"}}},
        "else": {"properties": {"cap": {"type": "null"}}},
    }


def checked_cap(mode_field: str, mode: str | None, cap: float | None) -> float | None:
    """``cap`` when it goes with ``mode`` (the value of ``mode_field``; None when that field
    failed its own check); ValueError when "cap" has none or another mode has one."""
    if mode == "cap" and cap is None:
        raise ValueError(f'{mode_field} "cap" needs a cap value')
    if mode is not None and mode != "cap" and cap is not None:
        raise ValueError(f'cap is only used with {mode_field} "cap"')
    return cap
