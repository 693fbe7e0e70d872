"""Number types shared by the models."""

from typing import Annotated

from pydantic import Field

FiniteFloat = Annotated[float, Field(strict=True, allow_inf_nan=False)]
"""A JSON number that is finite; strings and booleans are refused, integers are accepted."""
