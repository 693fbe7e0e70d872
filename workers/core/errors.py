"""Errors raised by the numerical core.

Tree::

    CoreError(ValueError)
    ├── InvalidArrayError      the array itself is unusable (shape, non-finite values)
    └── ParameterError         a parameter does not fit the data (e.g. sample larger than the set)

The service maps these to HTTP statuses in exactly one place (``service.problems``); the worker
maps them to the problem object stored with a failed job.
"""

__all__ = ["CoreError", "InvalidArrayError", "ParameterError"]


class CoreError(ValueError):
    """Base of every error the core raises on purpose.

    ``field`` is a JSON Pointer (RFC 6901) relative to the request, when the error is about one
    field of it, so that callers can point at the culprit.
    """

    def __init__(self, message: str, *, field: str | None = None) -> None:
        super().__init__(message)
        self.message = message
        self.field = field


class InvalidArrayError(CoreError):
    """The input array has the wrong shape or holds NaN/inf."""


class ParameterError(CoreError):
    """A parameter is outside what the data allows."""
