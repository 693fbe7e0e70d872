"""Request bodies many tests send, written once so that a change to the request format is
made in one place."""

from typing import Any

from tests.support.synthetic import HEXAGON


def rips_job(
    points: Any = HEXAGON,
    *,
    units: str | None = None,
    features: list[Any] | None = None,
    **filtration: Any,
) -> dict[str, Any]:
    """A Rips job on ``points`` (JSON-ready lists; by default the regular hexagon of side 1),
    with the ``filtration`` fields beside ``"type": "rips"``; ``units`` and ``features`` are
    sent only when given."""
    body: dict[str, Any] = {
        "input": {"type": "points", "points": points},
        "filtration": {"type": "rips", **filtration},
    }
    if units is not None:
        body["input"]["units"] = units
    if features is not None:
        body["features"] = features
    return body
