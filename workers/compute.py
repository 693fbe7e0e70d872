"""A long-lived child process that does the numerical work of one worker, and can be killed.

Why: a time limit raised as a Python exception (SIGALRM, a timer thread) cannot interrupt
native code such as the C++ reduction loop, and forking a fresh process per job costs more than a
small job itself. So each worker forks one child *after* the heavy imports, hands it jobs over
a pipe, and on overrun or cancellation kills it with SIGKILL and forks a new one (cheap, the
imports are already in memory).

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
from typing import Any

from workers.core.errors import CoreError
from workers.spec import JobPayload, Problem
from workers.spec.problems import CANCELLED_TYPE, PROBLEM_TYPE

__all__ = ["ComputeProcess", "JobAborted", "Handler", "CANCELLED"]

log = logging.getLogger(__name__)

Handler = Callable[[dict[str, Any], bytes], dict[str, Any]]
"""(JSON header, .npy bytes) -> result dict; runs in the child."""

POLL_INTERVAL_S = 0.05
"""How often a waiting worker looks for a cancel request; the result itself wakes it at once."""


CANCELLED = Problem(
    type=CANCELLED_TYPE,
    title="Cancelled",
    status=409,
    detail="the job was cancelled",
)


class JobAborted(Exception):
    """The job did not produce a result; ``problem`` says why."""

    def __init__(self, problem: Problem) -> None:
        super().__init__(problem.detail or problem.title)
        self.problem = problem


def _die_with_parent() -> None:
    """Ask Linux to SIGKILL this process when its parent dies (prctl PR_SET_PDEATHSIG)."""
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(1, signal.SIGKILL)
    except (OSError, AttributeError):  # not Linux: the daemon flag still reaps it on clean exit
        pass


def _child_main(connection: Connection, parent_end: Connection, handler: Handler) -> None:
    _die_with_parent()
    parent_end.close()  # else the child holds the pipe open and never sees EOF
    # The parent owns shutdown: SIGINT/SIGTERM sent to the group must not kill a job halfway.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    while True:
        try:
            header = json.loads(connection.recv_bytes())
            data = connection.recv_bytes()
        except EOFError:
            return
        try:
            reply: dict[str, Any] = {"result": handler(header, data)}
        except CoreError as error:
            problem = Problem(
                type=PROBLEM_TYPE + "invalid-request",
                title="Invalid request",
                status=422,
                detail=error.message,
                errors=[{"pointer": error.field, "message": error.message}]
                if error.field
                else None,
            )
            reply = {"problem": problem.model_dump(mode="json", exclude_none=True)}
        except MemoryError:
            problem = Problem(
                type=PROBLEM_TYPE + "out-of-memory",
                title="Out of memory",
                status=507,
                detail="the computation ran out of memory; lower max_dim, set max_edge or "
                "subsample",
            )
            reply = {"problem": problem.model_dump(mode="json", exclude_none=True)}
        except Exception:  # a bug: report it as such, keep the child alive for the next job
            log.error("job failed inside the compute process\n%s", traceback.format_exc())
            problem = Problem(
                type=PROBLEM_TYPE + "internal-error",
                title="Internal error",
                status=500,
                detail="the computation failed unexpectedly; the worker log has the traceback",
            )
            reply = {"problem": problem.model_dump(mode="json", exclude_none=True)}
        connection.send_bytes(json.dumps(reply, allow_nan=False).encode("utf-8"))


class ComputeProcess:
    """One forked child running ``handler``; ``run`` enforces a wall-time limit by SIGKILL."""

    def __init__(self, handler: Handler) -> None:
        self._handler = handler
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

    @property
    def pid(self) -> int | None:
        return self._process.pid

    def restart(self) -> None:
        """Kill the child (SIGKILL: native code cannot ignore it) and fork a fresh one."""
        self._process.kill()
        self._process.join()
        self._connection.close()
        self._start()

    def close(self) -> None:
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
    ) -> dict[str, Any]:
        """Run one job in the child; raise ``JobAborted`` on overrun, cancel, crash or error."""
        header = {"job_id": job_id, "payload": payload.model_dump(mode="json")}
        deadline = time.monotonic() + time_limit_s
        try:
            self._connection.send_bytes(json.dumps(header).encode("utf-8"))
            self._connection.send_bytes(input_bytes)
            while not self._connection.poll(
                max(0.0, min(POLL_INTERVAL_S, deadline - time.monotonic()))
            ):
                if time.monotonic() >= deadline:
                    self.restart()
                    raise JobAborted(
                        Problem(
                            type=PROBLEM_TYPE + "time-limit",
                            title="Time limit exceeded",
                            status=422,
                            detail=f"the job ran longer than its time limit of {time_limit_s:g} s "
                            "and was stopped; lower max_dim, set max_edge or subsample",
                        )
                    )
                if should_stop():
                    self.restart()
                    raise JobAborted(CANCELLED)
            reply = json.loads(self._connection.recv_bytes())
        except JobAborted:
            raise
        except (EOFError, OSError):
            code = self._process.exitcode
            self.restart()
            raise JobAborted(
                Problem(
                    type=PROBLEM_TYPE + "compute-crashed",
                    title="Computation crashed",
                    status=500,
                    detail=f"the compute process ended unexpectedly (exit code {code}); this "
                    "often means it ran out of memory",
                )
            ) from None
        except BaseException:
            # Anything else (RQ's own timeout, a warm shutdown turned cold): never leave the
            # child busy with a job nobody waits for.
            self.restart()
            raise
        if "problem" in reply:
            raise JobAborted(Problem.model_validate(reply["problem"]))
        result: dict[str, Any] = reply["result"]
        return result
