"""What /proc says about processes (Linux): who is whose child, and in which state."""

import subprocess
from pathlib import Path


def _stat(pid: int) -> list[str]:
    # The command name in parentheses may hold spaces; the fields after it do not.
    return Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()


def parents() -> dict[int, int]:
    """pid -> parent pid of every process visible now."""
    found: dict[int, int] = {}
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit():
            try:
                found[int(entry.name)] = int(_stat(int(entry.name))[1])
            except OSError:  # it ended while we looked
                continue
    return found


def children_of(pid: int) -> list[int]:
    """Direct children of ``pid``."""
    return [child for child, parent in parents().items() if parent == pid]


def descendants(pid: int) -> set[int]:
    """Every process below ``pid``, however deep."""
    table = parents()
    found: set[int] = set()
    frontier = {pid}
    while frontier:
        frontier = {child for child, parent in table.items() if parent in frontier} - found
        found |= frontier
    return found


def process_state(pid: int) -> str:
    """One-letter state: R running, S sleeping, Z zombie...; "gone" once it has ended."""
    try:
        return _stat(pid)[0]
    except OSError:
        return "gone"


def running(pid: int) -> bool:
    """True while ``pid`` exists and is not a zombie."""
    return process_state(pid) not in {"Z", "gone"}


def terminate(process: subprocess.Popen[bytes], seconds: float = 15) -> None:
    """SIGTERM ``process`` and reap it; SIGKILL it if it has not ended within ``seconds``."""
    process.terminate()
    try:
        process.wait(seconds)
    except subprocess.TimeoutExpired:
        process.kill()
        process.wait()


def cpu_ticks(pid: int) -> int:
    """CPU time ``pid`` has used so far, user and system, in clock ticks (proc(5) fields 14
    and 15); 0 once it has ended."""
    try:
        fields = _stat(pid)
    except OSError:
        return 0
    return int(fields[11]) + int(fields[12])
