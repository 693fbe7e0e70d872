"""The memory limit of a job: a cap on the address space of the process computing it.

A job's limit is how far its process may grow beyond the size it had when the job began, so
the libraries already mapped (numpy, scipy, gudhi: hundreds of MB of address space) do not
count against it. The cap is ``RLIMIT_AS`` (setrlimit(2)): an allocation past it fails with
ENOMEM, which numpy and CPython raise as ``MemoryError`` and C++ code as ``std::bad_alloc``
(pybind11 and Cython turn that into ``MemoryError`` too); native code that does not check
dies of SIGSEGV or SIGABRT. Address space is what the kernel can bound per process without a
cgroup; it over-counts memory reserved but never touched, which keeps the cap on the safe
side. Forked processes inherit the cap, and ``split_cap`` shares what is left among them.
"""

import resource
import signal
from collections.abc import Iterator
from contextlib import contextmanager

__all__ = ["MIB", "MEMORY_SIGNALS", "address_space", "address_space_cap", "headroom", "split_cap"]

MIB = 1 << 20

MEMORY_SIGNALS = frozenset({signal.SIGSEGV, signal.SIGBUS, signal.SIGABRT})
"""How native code dies when an allocation it did not check fails (a null pointer written
to, an uncaught std::bad_alloc ending in abort())."""


def address_space() -> int:
    """Bytes of address space this process has mapped now (``VmSize`` of /proc/self/status);
    0 where /proc is not there."""
    try:
        with open("/proc/self/status", encoding="ascii") as status:
            for line in status:
                if line.startswith("VmSize:"):
                    return int(line.split()[1]) * 1024  # the kernel reports kB
    except OSError:
        pass
    return 0


def _soft_limit(bytes_: int) -> None:
    """Lower the soft limit to ``bytes_``; never raise it (a cap set from outside, by prlimit
    or a parent's own, stays the tighter one)."""
    soft, hard = resource.getrlimit(resource.RLIMIT_AS)
    for bound in (soft, hard):
        if bound != resource.RLIM_INFINITY:
            bytes_ = min(bytes_, bound)
    resource.setrlimit(resource.RLIMIT_AS, (bytes_, hard))


@contextmanager
def address_space_cap(limit_bytes: int | None) -> Iterator[None]:
    """Let this process grow by at most ``limit_bytes`` (None: no cap) inside the block; the
    soft limit it had is restored on the way out (raising a soft limit up to the hard one is
    always allowed)."""
    if limit_bytes is None:
        yield
        return
    before, hard = resource.getrlimit(resource.RLIMIT_AS)
    _soft_limit(address_space() + limit_bytes)
    try:
        yield
    finally:
        resource.setrlimit(resource.RLIMIT_AS, (before, hard))


def headroom() -> int | None:
    """Bytes this process may still map under its soft cap; None when it has none."""
    soft, _ = resource.getrlimit(resource.RLIMIT_AS)
    if soft == resource.RLIM_INFINITY:
        return None
    return max(0, soft - address_space())


def split_cap(share_of: int) -> None:
    """In a freshly forked process, one of ``share_of``: keep 1/share_of of the headroom the
    cap inherited from the parent left, so the processes together stay within it."""
    room = headroom()
    if room is not None and share_of > 1:
        _soft_limit(address_space() + room // share_of)
