"""The memory limit of a job: a cap on the address space of the process computing it.

A job's limit is how far its process may grow beyond the size it had when the job began, so
the libraries already mapped (numpy, scipy, gudhi: hundreds of MB of address space) do not
count against it. Nor must the address space the process has mapped but is not using: free
chunks glibc's malloc keeps in its arenas after earlier work, and the reserved (PROT_NONE)
rest of a per-thread arena heap, which a forked child inherits and which malloc hands out
again without mapping anything (malloc(3), "Arena"; malloc_info(3)). Counted as "the size the
process had", they would let a job use them on top of its limit: a child forked from a
process with 110 MiB of such room got 143 MiB under a 30 MiB cap (measured). So the size a
limit starts from is the address space in use: what is mapped, after ``malloc_trim(3)`` has
given back what it can, less what malloc can still reuse. Where that reusable room is larger
than the limit the cap sits below the mapped size: the job may use that room (memory the
process already holds) but map nothing more, and room in pieces smaller than what it asks
for is no use to it. So the compute child (``workers.compute``) asks to be replaced by a
fresh fork of the lean worker process before a capped job when its room exceeds
``ROOM_SHARE`` of the limit: the job then gets most of its limit as new memory.
The cap is ``RLIMIT_AS`` (setrlimit(2)): an allocation past it fails with
ENOMEM, which numpy and CPython raise as ``MemoryError`` and C++ code as ``std::bad_alloc``
(pybind11 and Cython turn that into ``MemoryError`` too); native code that does not check
dies of SIGSEGV or SIGABRT. Address space is what the kernel can bound per process without a
cgroup; it over-counts memory reserved but never touched, which keeps the cap on the safe
side. Forked processes inherit the cap, and ``split_cap`` shares what is left among them.
"""

import ctypes
import re
import resource
import signal
from collections.abc import Iterator
from contextlib import contextmanager

__all__ = [
    "MIB",
    "MEMORY_SIGNALS",
    "ROOM_SHARE",
    "address_space",
    "address_space_cap",
    "address_space_in_use",
    "headroom",
    "reusable_address_space",
    "split_cap",
    "trim",
]

MIB = 1 << 20

ROOM_SHARE = 1 / 8
"""The most of a job's limit a used compute child's reusable room may take before the job
is run in a fresh child instead (our own choice: a job keeps at least 7/8 of its limit as
new memory; a fresh child is forked in milliseconds)."""

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


_HEAP_MAX_SIZE = 64 * MIB
"""Size of the address space one heap of a glibc per-thread arena reserves on 64-bit Linux
(malloc/arena.c: 2 * DEFAULT_MMAP_THRESHOLD_MAX); the part not in use is PROT_NONE, and the
heap grows into it by mprotect, which RLIMIT_AS does not count."""

_HEAP = re.compile(r'<heap nr="(\d+)">(.*?)</heap>', re.DOTALL)
_FIELD = re.compile(r'<(total|aspace) type="(fast|rest|total|subheaps)"[^>]* size="(\d+)"')


def _glibc_function(name: str) -> "ctypes._NamedFuncPointer | None":
    try:
        return getattr(ctypes.CDLL(None), name)  # type: ignore[no-any-return]
    except (OSError, AttributeError):  # not glibc (musl, macOS)
        return None


_MALLOC_TRIM = _glibc_function("malloc_trim")
_MALLOC_INFO = _glibc_function("malloc_info")
_OPEN_MEMSTREAM = _glibc_function("open_memstream")
_FCLOSE = _glibc_function("fclose")
_FREE = _glibc_function("free")
if _MALLOC_TRIM is not None:
    _MALLOC_TRIM.argtypes = [ctypes.c_size_t]
    _MALLOC_TRIM.restype = ctypes.c_int
if _OPEN_MEMSTREAM is not None:
    _OPEN_MEMSTREAM.argtypes = [ctypes.POINTER(ctypes.c_void_p), ctypes.POINTER(ctypes.c_size_t)]
    _OPEN_MEMSTREAM.restype = ctypes.c_void_p
if _MALLOC_INFO is not None:
    _MALLOC_INFO.argtypes = [ctypes.c_int, ctypes.c_void_p]
    _MALLOC_INFO.restype = ctypes.c_int
if _FCLOSE is not None:
    _FCLOSE.argtypes = [ctypes.c_void_p]
if _FREE is not None:
    _FREE.argtypes = [ctypes.c_void_p]


def _malloc_info() -> str:
    """glibc's malloc_info(3) report (XML, one <heap> per arena); "" where there is none."""
    if _MALLOC_INFO is None or _OPEN_MEMSTREAM is None or _FCLOSE is None or _FREE is None:
        return ""
    buffer, size = ctypes.c_void_p(), ctypes.c_size_t()
    stream = _OPEN_MEMSTREAM(ctypes.byref(buffer), ctypes.byref(size))
    if not stream:
        return ""
    try:
        _MALLOC_INFO(0, stream)
    finally:
        _FCLOSE(stream)  # flushes into buffer, size
    try:
        return ctypes.string_at(buffer.value, size.value).decode("ascii") if buffer.value else ""
    finally:
        _FREE(buffer)


def reusable_address_space() -> int:
    """Bytes mapped that malloc can hand out again without mapping more (0 where the C library
    is not glibc): the free chunks of the main arena, plus the free chunks and the unused
    reserve of the roomiest other arena. One other arena, not all: when the main arena
    cannot grow, malloc retries in one other arena and the thread stays with it (glibc
    malloc/arena.c, arena_get_retry)."""
    main, roomiest_other = 0, 0
    for number, body in _HEAP.findall(_malloc_info()):
        sizes = {kind: int(size) for _, kind, size in _FIELD.findall(body)}
        free = sizes.get("fast", 0) + sizes.get("rest", 0)
        if number == "0":
            main = free
        else:
            reserve = sizes.get("subheaps", 1) * _HEAP_MAX_SIZE - sizes.get("total", 0)
            roomiest_other = max(roomiest_other, free + max(0, reserve))
    return main + roomiest_other


def trim() -> None:
    """Give back to the kernel what malloc can (``malloc_trim(3)``); nothing off glibc."""
    if _MALLOC_TRIM is not None:
        _MALLOC_TRIM(0)


def address_space_in_use() -> int:
    """Bytes of address space this process uses now: mapped (after malloc has given back to
    the kernel what it can) less what malloc can reuse. What a limit is counted from."""
    trim()
    return max(0, address_space() - reusable_address_space())


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
    """Let this process use at most ``limit_bytes`` more than it uses now (None: no cap)
    inside the block; the soft limit it had is restored on the way out (raising a soft limit
    up to the hard one is always allowed)."""
    if limit_bytes is None:
        yield
        return
    before, hard = resource.getrlimit(resource.RLIMIT_AS)
    _soft_limit(address_space_in_use() + limit_bytes)
    try:
        yield
    finally:
        resource.setrlimit(resource.RLIMIT_AS, (before, hard))


def headroom() -> int | None:
    """Bytes this process may still use under its soft cap; None when it has none."""
    soft, _ = resource.getrlimit(resource.RLIMIT_AS)
    if soft == resource.RLIM_INFINITY:
        return None
    return max(0, soft - address_space_in_use())


def split_cap(share_of: int) -> None:
    """In a freshly forked process, one of ``share_of``: keep 1/share_of of the headroom the
    cap inherited from the parent left, so the processes together stay within it."""
    room = headroom()
    if room is not None and share_of > 1:
        _soft_limit(address_space_in_use() + room // share_of)
