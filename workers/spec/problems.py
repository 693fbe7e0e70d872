"""Problem details (RFC 9457), used by HTTP errors and by failed jobs alike."""

from typing import Annotated

from pydantic import BaseModel, ConfigDict, Field

PROBLEM_TYPE = "urn:lacuna:problem:"
"""Prefix of lacuna's problem type URIs; the suffix names the kind (e.g. ``invalid-request``)."""

CANCELLED_TYPE = PROBLEM_TYPE + "cancelled"
"""Problem type stored with a job stopped by ``DELETE /v1/jobs/{id}``."""


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
