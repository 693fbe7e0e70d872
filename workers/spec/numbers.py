"""Number types shared by the models."""

from typing import Annotated

from pydantic import Field

FiniteFloat = Annotated[float, Field(strict=True, allow_inf_nan=False)]
"""A JSON number that is finite; strings and booleans are refused, integers are accepted."""

MAX_MAGNITUDE = 1e100
"""Largest absolute coordinate: squared distances of 16 such coordinates stay finite."""

Coordinate = Annotated[FiniteFloat, Field(ge=-MAX_MAGNITUDE, le=MAX_MAGNITUDE)]
"""A finite coordinate small enough that distances between points cannot overflow."""
