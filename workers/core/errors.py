"""Errors raised by the numerical core, and the one error the job room raises.

Tree::

    CoreError(ValueError)
    ├── InvalidArrayError      the array itself is unusable (shape, non-finite values)
    ├── ParameterError         a parameter does not fit the data (e.g. sample larger than the set)
    └── RequestError           raised in ``workers.jobs`` only: ``field`` points into the request

A core function knows nothing of requests: its ``field`` is a JSON Pointer (RFC 6901) into its
own arguments (``"/sigma"`` from a function with a ``sigma`` parameter). The job room, which
knows where each argument came from, carries it into the request with
``pointing_into``, which raises a ``RequestError``. A failed job's problem
is made from the error in one place, ``workers.compute.problem_for``; HTTP statuses come from
the one table of problem kinds, ``workers.spec.problems.PROBLEM_KINDS``.
"""

from collections.abc import Iterator, Mapping
from contextlib import contextmanager

__all__ = ["CoreError", "InvalidArrayError", "ParameterError", "RequestError", "pointing_into"]


class CoreError(ValueError):
    """Base of every error the core raises on purpose.

    ``field``: a JSON Pointer into the arguments of the function that raised it (its first
    token a parameter name), when the error is about one of them.
    """

    def __init__(self, message: str, *, field: str | None = None) -> None:
        super().__init__(message)
        self.message = message
        self.field = field

    def into_request(self, prefix: str, renames: Mapping[str, str] | None = None) -> "RequestError":
        """This error pointing into a request: an argument named in ``renames`` becomes the
        request pointer given there (the place inside the argument means nothing in the
        request), any other goes under ``prefix``; an error about no argument in particular
        points nowhere."""
        if self.field is None:
            return RequestError(self.message)
        head = "/" + self.field[1:].split("/", 1)[0]
        if renames and head in renames:
            return RequestError(self.message, field=renames[head])
        return RequestError(self.message, field=prefix + self.field)


class InvalidArrayError(CoreError):
    """The input array has the wrong shape or holds NaN/inf."""


class ParameterError(CoreError):
    """A parameter is outside what the data allows."""


class RequestError(CoreError):
    """The job's request asks for what its data does not allow; ``field`` points into the
    request (raised by ``workers.jobs``, never by the core)."""


@contextmanager
def pointing_into(prefix: str, renames: Mapping[str, str] | None = None) -> Iterator[None]:
    """Around a core call whose arguments come from the request at ``prefix`` (each argument
    named as the request field it came from) or at the pointers in ``renames`` (argument
    pointer -> request pointer): a core error raised inside leaves as a RequestError pointing
    into the request (``CoreError.into_request``). Used by ``workers.jobs`` only."""
    try:
        yield
    except RequestError:
        raise
    except CoreError as error:
        raise error.into_request(prefix, renames) from None
