"""The supervisor's bookkeeping of ``lacuna serve`` (service/stack.py), on real child
processes: when a dead child is started again, what the log says, where the socket goes."""

import subprocess
import sys
from pathlib import Path

import pytest

from service.stack import (
    BACKOFF_S,
    MAX_BACKOFF_S,
    STABLE_S,
    _Child,
    _socket_path,
    default_data_dir,
)


def _dies(code: int) -> subprocess.Popen[bytes]:
    return subprocess.Popen([sys.executable, "-c", f"raise SystemExit({code})"])


def _delays(child: _Child, deaths: int, lived: float) -> list[float]:
    """Let ``child`` die ``deaths`` times, each ``lived`` seconds after its start."""
    delays = []
    for _ in range(deaths):
        process = child.launch()
        process.wait()
        now = child.started_at + lived
        child.schedule_restart(process.returncode, now)
        assert child.restart_at is not None
        delays.append(child.restart_at - now)
    return delays


def test_a_child_that_keeps_dying_waits_longer_each_time(
    capsys: pytest.CaptureFixture[str],
) -> None:
    child = _Child("worker 1", lambda: _dies(3))
    delays = _delays(child, 9, lived=1.0)
    # Capped exponential backoff (common practice): the first restart at once, then doubling.
    assert delays == [0.0, *(min(MAX_BACKOFF_S, BACKOFF_S * 2**k) for k in range(8))]
    assert delays[-1] == MAX_BACKOFF_S
    said = capsys.readouterr().err
    assert said.count("worker 1 (pid ") == 9 and "exited with code 3" in said


def test_a_child_that_lived_long_enough_is_restarted_at_once() -> None:
    child = _Child("worker 1", lambda: _dies(1))
    assert _delays(child, 3, lived=1.0)[-1] > 0
    assert _delays(child, 2, lived=STABLE_S + 1) == [0.0, 0.0]


def test_a_killed_child_is_named_by_its_signal(capsys: pytest.CaptureFixture[str]) -> None:
    child = _Child(
        "HTTP", lambda: subprocess.Popen([sys.executable, "-c", "input()"], stdin=subprocess.PIPE)
    )
    process = child.launch()
    process.kill()
    process.wait()
    if process.stdin is not None:
        process.stdin.close()
    child.schedule_restart(process.returncode, child.started_at + 60)
    assert "HTTP (pid" in capsys.readouterr().err
    assert process.returncode == -9  # SIGKILL is 9 on Linux (signal(7))


def test_the_socket_stays_in_the_data_directory_while_its_path_fits(tmp_path: Path) -> None:
    scratch = tmp_path / "s"
    assert _socket_path(tmp_path, scratch) == tmp_path / "redis.sock"

    # unix(7): sun_path holds 108 bytes, the terminating NUL included.
    def folder(length: int) -> Path:
        """A folder under tmp_path whose socket path is ``length`` bytes long."""
        return tmp_path / ("d" * (length - len(str(tmp_path)) - 1 - len("/redis.sock")))

    deep = folder(108)
    assert len(str(deep / "redis.sock")) == 108
    assert _socket_path(deep, scratch) == scratch / "redis.sock"
    fits = folder(107)
    assert len(str(fits / "redis.sock")) == 107
    assert _socket_path(fits, scratch) == fits / "redis.sock"


def test_the_default_data_directory_follows_xdg(
    monkeypatch: pytest.MonkeyPatch, tmp_path: Path
) -> None:
    # XDG Base Directory Specification 0.8: $XDG_STATE_HOME, default $HOME/.local/state; a
    # relative path in it is invalid and ignored.
    monkeypatch.setenv("HOME", str(tmp_path))
    monkeypatch.setenv("XDG_STATE_HOME", "/srv/state")
    assert default_data_dir() == Path("/srv/state/lacuna")
    monkeypatch.setenv("XDG_STATE_HOME", "relative/state")
    assert default_data_dir() == tmp_path / ".local" / "state" / "lacuna"
    monkeypatch.delenv("XDG_STATE_HOME")
    assert default_data_dir() == tmp_path / ".local" / "state" / "lacuna"
