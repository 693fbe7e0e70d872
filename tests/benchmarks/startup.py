"""Start-up of the ``lacuna`` command: the installed ``lacuna --help`` beside a bare
interpreter (``python -c pass``) and beside the imports a client command pays for
(``python -c "import requests, numpy"``), run interleaved in one loop so a busy moment of the
machine falls on every row alike. Goal: ``lacuna --help`` under 0.3 s."""

import statistics
import subprocess
import sys
import time
from pathlib import Path

from tests.benchmarks.vectors import _other_load

GOAL_S = 0.3
"""What ``lacuna --help`` may take, wall clock, from exec to exit."""

RUN_CAP_S = 10.0
"""One start-up slower than this stops the table (something is wrong, not slow)."""


def _commands() -> dict[str, list[str]]:
    lacuna = str(Path(sys.executable).with_name("lacuna"))
    return {
        "python -c pass": [sys.executable, "-c", "pass"],
        'python -c "import requests, numpy"': [sys.executable, "-c", "import requests, numpy"],
        "lacuna --help": [lacuna, "--help"],
    }


def _seconds(command: list[str]) -> float:
    started = time.perf_counter()
    subprocess.run(
        command,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
        check=True,
        timeout=RUN_CAP_S,
    )
    return time.perf_counter() - started


@_other_load()
def startup_table(runs: int = 15, cap: float = 120.0) -> None:
    """Median and min wall-clock seconds of each command over ``runs`` rounds (after one
    warm-up round), the whole table stopped after ``cap`` seconds."""
    commands = _commands()
    times: dict[str, list[float]] = {name: [] for name in commands}
    deadline = time.monotonic() + cap
    try:
        for command in commands.values():  # warm-up: the files in the page cache
            _seconds(command)
        while min(map(len, times.values())) < runs and time.monotonic() < deadline:
            for name, command in commands.items():
                times[name].append(_seconds(command))
    except subprocess.TimeoutExpired as slow:
        print(f"\n## Start-up: stopped, {slow.cmd} took over {RUN_CAP_S:.0f} s\n")
        return
    rounds = min(map(len, times.values()))
    bare = statistics.median(times["python -c pass"])
    print(f"\n## Start-up of the lacuna command: wall-clock seconds over {rounds} rounds\n")
    print(f"Goal: `lacuna --help` under {GOAL_S} s.\n")
    print("| command | median s | min s | median above `python -c pass` s |")
    print("|---|---|---|---|")
    for name, seconds in times.items():
        median = statistics.median(seconds)
        print(f"| `{name}` | {median:.3f} | {min(seconds):.3f} | {median - bare:.3f} |")
    ours = statistics.median(times["lacuna --help"])
    verdict = "met" if ours < GOAL_S else "NOT met"
    print(f"\n`lacuna --help`: median {ours:.3f} s, goal < {GOAL_S} s {verdict}.", flush=True)
