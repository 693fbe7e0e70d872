"""A long-lived child process that does the numerical work of one worker, and can be killed.

Why: a time limit raised as a Python exception (SIGALRM, a timer thread) cannot interrupt
native code such as the C++ reduction loop, and forking a fresh process per job costs more
than a small job itself. So each worker forks one child *after* the heavy imports, hands it
jobs over a pipe, and on overrun or cancellation kills it with SIGKILL; the next job forks a
new one (cheap: the imports are already in memory).

A job's memory limit (``JobPayload.memory_limit_mb``, lowered to the worker's
``job_memory_ceiling_mb``) caps the child's address space while the job runs
(``workers.memory``); a used child whose malloc holds much free room (which counts against
the limit) asks to be replaced by a fresh fork before a capped job, so the job gets its
limit as new memory. A job over it fails with a memory-limit problem however the child
gives way: a ``MemoryError`` (numpy, CPython, C++ ``std::bad_alloc`` through pybind11 or
Cython), or death by SIGSEGV, SIGBUS or SIGABRT, which is how native code that does not
check an allocation ends under the cap. After a memory-limit the child is killed and the
next job forks a fresh one: an allocation that failed halfway through a library may have
left it in a state nobody should compute in. A SIGKILL the worker did not send comes from
the kernel's OOM killer (the machine ran out, not the job's limit, which never kills): that
stays a compute-crashed problem.

The pipe carries JSON and .npy bytes only; nothing is pickled.
"""

import ctypes
import json
import logging
import multiprocessing
import signal
import time
import traceback
from collections.abc import Callable
from multiprocessing.connection import Connection
from typing import Any, Protocol

from workers import defaults
from workers.core.errors import CoreError, RequestError
from workers.memory import (
    MEMORY_SIGNALS,
    MIB,
    ROOM_SHARE,
    address_space_cap,
    reusable_address_space,
    trim,
)
from workers.settings import WorkerSettings
from workers.spec import JobPayload, Problem, failures

__all__ = ["ComputeProcess", "JobAborted", "Handler", "Report", "problem_for"]

log = logging.getLogger(__name__)


class Report(Protocol):
    """How far a computation is: ``done`` of ``total``, and what it does now (``stage``)."""

    def __call__(self, done: int, total: int, stage: str | None = None) -> None: ...


Handler = Callable[[dict[str, Any], bytes, Report], dict[str, Any]]
"""(JSON header, .npy bytes, progress callback) -> result dict; runs in the child."""

_PR_SET_PDEATHSIG = 1  # from <sys/prctl.h>


def problem_for(error: Exception) -> Problem:
    """The problem a computation that raised ``error`` is reported with."""
    if isinstance(error, RequestError):
        return failures.invalid_parameters(error.message, error.field)
    if isinstance(error, CoreError):
        # Its field points into the arguments of a core function, not into the request: a
        # call the job room did not wrap in pointing_into. The message still says what.
        log.warning("core error without a request pointer (field %r): %s", error.field, error)
        return failures.invalid_parameters(error.message, None)
    if isinstance(error, MemoryError):
        return failures.out_of_memory()
    # A bug: say so, with the traceback in the worker log.
    log.error("computation failed\n%s", "".join(traceback.format_exception(error)))
    return failures.internal_error()


class JobAborted(Exception):
    """The job did not produce a result; ``problem`` says why."""

    def __init__(self, problem: Problem) -> None:
        super().__init__(problem.detail or problem.title)
        self.problem = problem


def _die_with_parent() -> None:
    """Ask Linux to SIGKILL this process when its parent dies (prctl PR_SET_PDEATHSIG)."""
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(_PR_SET_PDEATHSIG, signal.SIGKILL)
    except (OSError, AttributeError):  # not Linux: the daemon flag still reaps it on clean exit
        pass


class _ProgressSender:
    """The child's progress callback: a JSON message to the parent, at most every 0.25 s
    unless the stage changes (a long step must not hide behind the short one before it)."""

    def __init__(self, connection: Connection) -> None:
        self._connection = connection
        self._last = 0.0
        self._stage: str | None = None

    def __call__(self, done: int, total: int, stage: str | None = None) -> None:
        now = time.monotonic()
        due = now - self._last >= defaults.PROGRESS_INTERVAL_S
        if due or done == total or stage != self._stage:
            self._last = now
            self._stage = stage
            progress: list[Any] = [done, total] if stage is None else [done, total, stage]
            self._connection.send_bytes(json.dumps({"progress": progress}).encode("utf-8"))


def _child_main(connection: Connection, parent_end: Connection, handler: Handler) -> None:
    _die_with_parent()
    parent_end.close()  # else the child holds the pipe open and never sees EOF
    # The parent owns shutdown: SIGINT/SIGTERM sent to the group must not kill a job halfway.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    fresh = True
    while True:
        try:
            header = json.loads(connection.recv_bytes())
            data = connection.recv_bytes()
        except EOFError:
            return
        limit_mb: int | None = header.get("memory_limit_mb")
        if limit_mb is not None and not fresh and _room_too_large(limit_mb):
            connection.send_bytes(json.dumps({"fresh_child_needed": True}).encode("utf-8"))
            continue
        fresh = False
        try:
            # The reply is encoded under the cap too: a large result is part of the job.
            with address_space_cap(None if limit_mb is None else limit_mb * MIB):
                result = handler(header, data, _ProgressSender(connection))
                reply = json.dumps({"result": result}, allow_nan=False).encode("utf-8")
                del result
        except MemoryError:
            problem = (
                failures.memory_limit_exceeded(limit_mb, "an allocation failed")
                if limit_mb is not None
                else failures.out_of_memory()
            )
            reply = _problem_reply(problem, refork=True)
        except Exception as error:  # reported as the job's problem; the child lives on
            reply = _problem_reply(problem_for(error), refork=False)
        connection.send_bytes(reply)


def _room_too_large(limit_mb: int) -> bool:
    """Does malloc's reusable room here (free chunks left by earlier jobs) take more than
    ``ROOM_SHARE`` of the limit? It counts against the limit (``workers.memory``), so the job
    would get less than its limit of new memory."""
    trim()
    return reusable_address_space() > ROOM_SHARE * limit_mb * MIB


def _problem_reply(problem: Problem, *, refork: bool) -> bytes:
    body = {"problem": problem.model_dump(mode="json", exclude_none=True), "refork": refork}
    return json.dumps(body).encode("utf-8")


class ComputeProcess:
    """One forked child running ``handler``; ``run`` enforces a wall-time limit by SIGKILL
    and a memory limit by RLIMIT_AS in the child.

    ``settings`` (default: read from the environment) give the worker's memory ceiling.
    """

    def __init__(self, handler: Handler, settings: WorkerSettings | None = None) -> None:
        self._handler = handler
        self._memory_ceiling_mb = (settings or WorkerSettings()).job_memory_ceiling_mb
        self._context = multiprocessing.get_context("fork")
        self._start()

    def _start(self) -> None:
        parent_end, child_end = self._context.Pipe(duplex=True)
        self._process = self._context.Process(
            target=_child_main,
            args=(child_end, parent_end, self._handler),
            name="lacuna-compute",
            daemon=True,
        )
        self._process.start()
        child_end.close()
        self._connection = parent_end

    def memory_limit_mb(self, payload: JobPayload) -> int | None:
        """The job's memory limit here: the payload's, lowered to this worker's ceiling."""
        limits = [m for m in (payload.memory_limit_mb, self._memory_ceiling_mb) if m is not None]
        return min(limits) if limits else None

    @property
    def pid(self) -> int | None:
        """Pid of the current child; None after a kill until the next job forks a new one."""
        return self._process.pid if self._process.is_alive() else None

    def kill(self) -> None:
        """SIGKILL the child (native code cannot ignore it); the next ``run`` forks a new one."""
        self._process.kill()
        self._process.join()
        self._connection.close()

    def close(self) -> None:
        """Let the child exit on end-of-file; kill it if it is busy."""
        self._connection.close()
        self._process.join(timeout=2)
        if self._process.is_alive():
            self._process.kill()
            self._process.join()

    def run(
        self,
        *,
        job_id: str,
        payload: JobPayload,
        input_bytes: bytes,
        time_limit_s: float,
        should_stop: Callable[[], bool],
        on_progress: Report | None = None,
    ) -> dict[str, Any]:
        """Run one job in the child; raise ``JobAborted`` on overrun, cancel, crash or error.

        Progress messages of the child go to ``on_progress`` as they arrive.
        """
        if not self._process.is_alive():
            if not self._connection.closed:
                self._connection.close()
            self._start()
        limit_mb = self.memory_limit_mb(payload)
        header = {
            "job_id": job_id,
            "payload": payload.model_dump(mode="json"),
            "memory_limit_mb": limit_mb,
        }
        deadline = time.monotonic() + time_limit_s
        encoded_header = json.dumps(header).encode("utf-8")
        try:
            self._connection.send_bytes(encoded_header)
            self._connection.send_bytes(input_bytes)
            while True:
                if self._connection.poll(
                    max(0.0, min(defaults.POLL_INTERVAL_S, deadline - time.monotonic()))
                ):
                    reply = json.loads(self._connection.recv_bytes())
                    if reply.get("fresh_child_needed"):
                        # A fresh child never asks again, so this happens once per job.
                        self.kill()
                        self._start()
                        self._connection.send_bytes(encoded_header)
                        self._connection.send_bytes(input_bytes)
                        continue
                    if "progress" not in reply:
                        break
                    if on_progress is not None:
                        on_progress(*reply["progress"])
                    continue
                if time.monotonic() >= deadline:
                    raise JobAborted(failures.time_limit_exceeded(time_limit_s))
                if should_stop():
                    raise JobAborted(failures.cancelled())
        except (EOFError, OSError):
            self._process.join(timeout=1)  # the pipe closes a moment before the exit status
            code = self._process.exitcode
            self.kill()
            if limit_mb is not None and code is not None and -code in MEMORY_SIGNALS:
                name = signal.Signals(-code).name
                how = f"the compute process died of {name}, as native code does when an "
                how += "allocation fails"
                raise JobAborted(failures.memory_limit_exceeded(limit_mb, how)) from None
            raise JobAborted(failures.computation_crashed(code)) from None
        except BaseException:
            # Overrun, cancel, RQ's own timeout, a shutdown: never leave the child busy with
            # a job nobody waits for.
            self.kill()
            raise
        if "problem" in reply:
            if reply.get("refork"):
                self.kill()  # the next job forks a fresh child
            raise JobAborted(Problem.model_validate(reply["problem"]))
        result: dict[str, Any] = reply["result"]
        return result
