"""How a worker shows it is alive, how a dead one is told from a live one, and who owns a name.

Alive means beating: a thread of the worker (``Heartbeat``) renews, every
``heartbeat_interval_s``, its RQ registration (the hash ``rq:worker:<name>``: its
``last_heartbeat`` and a lifetime of ``dead_after_s``, so a dead worker's registration lapses
by Redis's own clock) and the claims of the jobs it runs (``workers.reaper``). A thread, not
the job loop: the worker's main thread may wait on a computation or on Redis for longer than
a beat. When the registration is gone (Redis restarted without its data), the next beat
writes it again and adds the worker to RQ's registries, so /readyz sees it within one beat.

After a beat, the thread reaps jobs of dead workers (``workers.reaper``), but only once it
has reached Redis without a gap for ``dead_after_s``: after an outage every worker's claims
look lapsed, and the live ones need a beat to renew them first.

A name (``--name``) belongs to one live worker. A worker starting under a name whose
registration still lives (``claim_name``) takes it over when the holder is dead: same host
and the holder's pid is gone (or is its own: a restarted container), or the holder's
``last_heartbeat`` does not move for two beats. A holder that still beats is a live twin: the
newcomer refuses to start (``NameInUse``), as RQ does, but only then. The jobs a dead
predecessor was running are reaped at once, without waiting for their claims to lapse.
"""

import logging
import os
import socket
import threading
import time
from collections.abc import Callable

from redis import Redis
from rq import Queue, worker_registration
from rq.registry import StartedJobRegistry
from rq.utils import as_text, current_timestamp, now, utcformat
from rq.worker import BaseWorker

from workers.reaper import reap_claim, reap_lapsed, reap_stranded, reaper_lock_key
from workers.reconnect import LOST, Backoff
from workers.settings import WorkerSettings

__all__ = ["Heartbeat", "NameInUse", "claim_name", "release_name"]

log = logging.getLogger(__name__)


class NameInUse(RuntimeError):
    """A live worker already runs under this name."""


def _name_lock_key(name: str) -> str:
    return f"lacuna:worker-name:{name}"


class Heartbeat(threading.Thread):
    """Beats for ``worker`` on ``connection`` (one without redis-py's own retries, so every
    failure is seen), and reaps the jobs of dead workers."""

    def __init__(self, worker: BaseWorker, connection: Redis, settings: WorkerSettings) -> None:
        super().__init__(name=f"heartbeat {worker.name}", daemon=True)
        self._worker = worker
        self._connection = connection
        self._settings = settings
        self._stop_event = threading.Event()
        self._queues = [
            Queue(q.name, connection=connection, serializer=q.serializer) for q in worker.queues
        ]

    def stop(self) -> None:
        self._stop_event.set()
        self.join(timeout=self._settings.dead_after_s)

    def run(self) -> None:
        settings = self._settings
        backoff = Backoff(min(settings.redis_backoff_max_s, settings.heartbeat_interval_s))
        connected_since: float | None = None
        last_beat = 0.0
        wait = 0.0
        while not self._stop_event.wait(wait):
            wait = settings.heartbeat_interval_s
            try:
                self.beat()
                moment = time.monotonic()
                # A gap of half a lifetime (an outage redis-py's retries hid, a stalled
                # process) restarts the count as an error would.
                if connected_since is None or moment - last_beat > settings.dead_after_s / 2:
                    connected_since = moment
                last_beat = moment
                if backoff.failures:
                    log.warning("worker %s: Redis answers again; beating", self._worker.name)
                backoff.reset()
                if moment - connected_since >= settings.dead_after_s:
                    self.reap()
            except LOST as error:
                connected_since = None
                wait = backoff.next_wait()
                if backoff.failures == 1:
                    log.warning(
                        "worker %s: Redis unreachable (%s); beating again every %.1f s at most",
                        self._worker.name,
                        error,
                        backoff.cap_s,
                    )
            except Exception:
                # A silent heartbeat thread would make a live worker look dead and its jobs
                # be run twice: log the bug and beat again.
                log.exception("worker %s: heartbeat failed", self._worker.name)

    def beat(self) -> None:
        """Renew the registration and the claims of running jobs; re-register when gone."""
        worker = self._worker
        lifetime = self._settings.dead_after_s
        claims_lapse = current_timestamp() + lifetime
        pipe = self._connection.pipeline(transaction=False)
        pipe.hset(worker.key, "last_heartbeat", utcformat(now()))
        pipe.expire(worker.key, lifetime)
        worker_registration.register(worker, pipe)
        for execution in list(worker.executions.values()):
            job = execution._job  # set when RQ created the execution: no Redis read here
            origin = job.origin if job is not None else worker.queues[0].name
            registry = StartedJobRegistry(origin, self._connection)
            # xx: renew only; a claim the job's end removed meanwhile stays removed.
            pipe.zadd(registry.key, {execution.composite_key: claims_lapse}, xx=True)
            pipe.expire(execution.key, lifetime)
        pipe.expire(worker.executions_key, lifetime)
        created = pipe.execute()[0]
        if created:  # the hash was gone: Redis lost it (restart without data) or it lapsed
            log.warning("worker %s: registration was gone; registering again", worker.name)
            with self._connection.pipeline() as again:
                again.hset(worker.key, mapping={**worker.serialize(), "state": worker.get_state()})
                again.expire(worker.key, lifetime)
                again.execute()

    def reap(self) -> None:
        """Reap lapsed claims and stranded jobs (``workers.reaper``) on each queue, if no other
        worker did within the interval."""
        settings = self._settings
        for queue in self._queues:
            lock_ms = max(1, int(settings.heartbeat_interval_s * 1000))
            if not self._connection.set(
                reaper_lock_key(queue), self._worker.name, nx=True, px=lock_ms
            ):
                continue
            why = f"no heartbeat for over {settings.dead_after_s} s"
            reap_lapsed(queue, settings.lost_job_retries, why)
            reap_stranded(queue, settings.lost_job_retries, settings.dead_after_s)


def _process_gone(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return True
    except PermissionError:  # exists, someone else's
        return False
    return False


def _known_dead(holder: dict[str, str], worker: BaseWorker) -> bool:
    """Is the holder a previous process of this host that has ended (or whose pid we have)?"""
    if holder.get("hostname") != socket.gethostname() or not holder.get("pid"):
        return False
    pid = int(holder["pid"])
    return pid == os.getpid() or _process_gone(pid)


def _still_beating(
    read: Callable[[], dict[str, str]], first: dict[str, str], settings: WorkerSettings
) -> bool:
    """Does the holder's ``last_heartbeat`` move within two beats (and a second)?"""
    deadline = time.monotonic() + 2 * settings.heartbeat_interval_s + 1
    while time.monotonic() < deadline:
        time.sleep(min(0.5, settings.heartbeat_interval_s / 2))
        now_held = read()
        if not now_held or "death" in now_held:
            return False
        if now_held.get("last_heartbeat") != first.get("last_heartbeat"):
            return True
    return False


def claim_name(worker: BaseWorker, settings: WorkerSettings) -> None:
    """Make ``worker.name`` free to register: NameInUse when a live worker holds it; else
    clear a dead predecessor's registration and reap the jobs it was running.

    Holds a lock on the name (``release_name`` frees it once registered), so two workers
    starting at once under one name cannot both take it."""
    connection = worker.connection
    lock = _name_lock_key(worker.name)
    # The lock lives one lifetime: one left by a newcomer that died lapses while we wait.
    deadline = time.monotonic() + settings.dead_after_s + 2 * settings.heartbeat_interval_s
    holder_id = f"{socket.gethostname()}:{os.getpid()}"
    while not (
        connection.set(lock, holder_id, nx=True, ex=settings.dead_after_s)
        or connection.get(lock) == holder_id.encode()  # ours, from an attempt cut short
    ):
        if time.monotonic() > deadline:
            raise NameInUse(f"another worker named {worker.name!r} is starting")
        time.sleep(0.2)

    def read() -> dict[str, str]:
        raw = connection.hgetall(worker.key)
        return {as_text(k): as_text(v) for k, v in raw.items()}

    holder = read()
    if not holder or "death" in holder:
        return
    if not _known_dead(holder, worker) and _still_beating(read, holder, settings):
        connection.delete(lock)
        raise NameInUse(
            f"a live worker named {worker.name!r} (host {holder.get('hostname')}, pid "
            f"{holder.get('pid')}) is still beating; give this one another --name"
        )
    log.warning(
        "worker %s: taking the name over from a dead predecessor (host %s, pid %s)",
        worker.name,
        holder.get("hostname"),
        holder.get("pid"),
    )
    claims = [as_text(c) for c in connection.smembers(worker.executions_key)]
    for claim in claims:
        for queue in worker.queues:
            reap_claim(
                queue, claim, settings.lost_job_retries, "it was restarted under the same name"
            )
    connection.delete(worker.key, worker.executions_key)


def release_name(worker: BaseWorker) -> None:
    """Free the name lock ``claim_name`` took (the registration now holds the name)."""
    worker.connection.delete(_name_lock_key(worker.name))
