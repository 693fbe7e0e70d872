"""Problem details (RFC 9457), used by HTTP errors and by failed jobs alike."""

from typing import Annotated

from pydantic import BaseModel, ConfigDict, Field


class FieldError(BaseModel):
    """One thing wrong with one field of the request."""

    pointer: Annotated[str, Field(description="JSON Pointer (RFC 6901) into the request body.")]
    message: str


class Problem(BaseModel):
    """An ``application/problem+json`` object (RFC 9457)."""

    model_config = ConfigDict(extra="allow")

    type: Annotated[str, Field(description="URI reference naming the kind of problem.")] = (
        "about:blank"
    )
    title: str
    status: int
    detail: str | None = None
    instance: str | None = None
    errors: list[FieldError] | None = None
