"""Tagged unions: every union of the contract is told apart by a literal ``type`` field."""

from types import UnionType
from typing import Annotated, Any, Union, get_args, get_origin

from pydantic import BaseModel, Discriminator, Tag
from pydantic.fields import FieldInfo

__all__ = ["members_by_tag", "discriminated_members", "strip_optional"]


def members_by_tag(annotation: Any) -> dict[str, type[BaseModel]]:
    """``type`` tag -> model for a union of models (a single model is a union of one)."""
    annotation = strip_optional(annotation)
    members = [m for m in (get_args(annotation) or (annotation,)) if m is not type(None)]
    return {get_args(m.model_fields["type"].annotation)[0]: m for m in members}


def discriminated_members(annotation: Any) -> dict[str, Any] | None:
    """The tag map if ``annotation`` is a discriminated union (possibly Optional), else None.

    Unions told apart by a ``type`` field map each tag to its model; unions told apart by a
    callable ``Discriminator`` map each member's ``Tag`` to the member's annotation.
    """
    if get_origin(annotation) is Annotated:
        base, *metadata = get_args(annotation)
        if any(isinstance(m, FieldInfo) and m.discriminator for m in metadata):
            return members_by_tag(base)
        if any(isinstance(m, Discriminator) for m in metadata):
            return {_tag_of(member): member for member in get_args(base)}
        return discriminated_members(base)
    if get_origin(annotation) in (Union, UnionType):
        inner = [a for a in get_args(annotation) if a is not type(None)]
        return discriminated_members(inner[0]) if len(inner) == 1 else None
    return None


def strip_optional(annotation: Any) -> Any:
    """``annotation`` without Annotated wrappers and without ``| None``."""
    while True:
        if get_origin(annotation) is Annotated:
            annotation = get_args(annotation)[0]
        elif get_origin(annotation) in (Union, UnionType):
            inner = [a for a in get_args(annotation) if a is not type(None)]
            if len(inner) != 1:
                return annotation
            annotation = inner[0]
        else:
            return annotation


def _tag_of(member: Any) -> str:
    """The ``Tag`` a member of a callable-discriminated union is annotated with."""
    tags = [m.tag for m in get_args(member)[1:] if isinstance(m, Tag)]
    if not tags:
        raise TypeError(f"{member} has no Tag")
    return str(tags[0])
