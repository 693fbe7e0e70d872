"""README.md's commands run as written: every command of its ```sh blocks and every ```python
block, in order, in one scratch folder, against a real ``lacuna serve`` of the suite (its own
port and Redis; never port 8000 or 6379 of the machine).

Substituted: the test server's address for ``localhost:8000`` / ``127.0.0.1:8000``, the job
id the quickstart's POST answered for ``<id>``, the installed ``lacuna`` for
``.venv/bin/lacuna`` and the test's interpreter for ``.venv/bin/python`` (inline commands).
A command that cannot run here is in NOT_RUN with its reason; any other command the README
gains is run, so the README cannot drift from what works.
"""

import json
import os
import re
import shlex
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path
from urllib.parse import urlsplit

import numpy as np
import pytest
from PIL import Image

from tests.support.redis import E2E_DB, with_database
from tests.support.stack import LACUNA
from tests.support.synthetic import ring_mask

pytestmark = [pytest.mark.e2e, pytest.mark.slow]

README = Path(__file__).resolve().parents[2] / "README.md"

NOT_RUN = {
    r"^make (serve|test)\b": "installs the project's venv and runs a server on port 8000, or "
    "the whole suite",
    r"^pip install\b": "installs packages",
    r"^lacuna keys \S+ .*--redis redis://HOST": "the operator's Redis on another host (HOST)",
    r"^lacuna (serve|worker) --redis redis://HOST": "a shared Redis on another host (HOST)",
    r"^docker\b": "needs Docker and builds an image",
    r"\blab-server\b": "a lab server's host name",
}
"""Commands of README.md that this test does not run, by pattern, each with its reason."""

SERVERS = re.compile(r"^(\S*/)?(lacuna (serve|worker)|make serve)\b")
"""Commands that start a server or worker: never run here (they would bind port 8000 or
reach a Redis the suite did not start) unless the README gives them a host of their own, and
then they are in NOT_RUN."""

LOCATION = re.compile(r"Location: /v1/jobs/([0-9a-f-]{36})")


@dataclass(frozen=True)
class Command:
    """One command of README.md: the text as written, its block's language and line."""

    text: str
    language: str
    line: int


def blocks(markdown: str) -> list[tuple[str, int, str]]:
    """(language, line of the opening fence, body) of every fenced code block."""
    found = []
    lines = markdown.splitlines()
    index = 0
    while index < len(lines):
        opening = re.match(r"^```(\w*)\s*$", lines[index])
        if opening is None:
            index += 1
            continue
        end = index + 1
        while end < len(lines) and lines[end].strip() != "```":
            end += 1
        found.append((opening.group(1), index + 1, "\n".join(lines[index + 1 : end])))
        index = end + 1
    return found


def _complete(text: str) -> bool:
    """Whether ``text`` is a whole shell command: no open quote, no trailing backslash."""
    if text.rstrip().endswith("\\"):
        return False
    try:
        shlex.split(text, comments=True)
    except ValueError:  # "No closing quotation"
        return False
    return True


def shell_commands(body: str, first_line: int) -> list[Command]:
    """The commands of a shell block: comment lines left out, continued lines, quotes that
    span lines and here-documents kept with their command."""
    commands = []
    lines = body.splitlines()
    index = 0
    while index < len(lines):
        line = lines[index]
        start = index
        index += 1
        if not line.strip() or line.lstrip().startswith("#"):
            continue
        text = line
        heredoc = re.search(r"<<-?\s*'?\"?(\w+)'?\"?", line)
        if heredoc is not None:
            while index < len(lines) and lines[index].strip() != heredoc.group(1):
                text += "\n" + lines[index]
                index += 1
            text += "\n" + lines[index]
            index += 1
        while not _complete(text) and index < len(lines):
            text += "\n" + lines[index]
            index += 1
        commands.append(Command(text, "sh", first_line + 1 + start))
    return commands


def readme_commands() -> list[Command]:
    """Every command of README.md's sh blocks and every python block, in README order."""
    commands: list[Command] = []
    for language, line, body in blocks(README.read_text(encoding="utf-8")):
        if language == "sh":
            commands += shell_commands(body, line)
        elif language == "python":
            commands.append(Command(body, "python", line))
    return commands


def not_run_reason(command: Command) -> str | None:
    for pattern, reason in NOT_RUN.items():
        if re.search(pattern, command.text):
            return reason
    return None


@pytest.fixture(scope="module")
def folder(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The scratch folder the commands run in, with the one input the README assumes: the
    vessel wall mask of its images section (a ring of radii 10 and 16 um on 0.5 um pixels,
    0/255, made by ring_mask as the README says)."""
    here = tmp_path_factory.mktemp("readme")
    wall = ring_mask((80, 80), (19.75, 19.75), 10.0, 16.0, spacing=(0.5, 0.5))
    Image.fromarray(wall.astype(np.uint8) * 255).save(here / "vessel_mask.png")
    return here


def substituted(text: str, base: str, job_id: str | None) -> str:
    address = urlsplit(base).netloc
    text = text.replace(".venv/bin/lacuna", LACUNA)
    text = re.sub(r"\b(localhost|127\.0\.0\.1):8000\b", address, text)
    if "<id>" in text:
        assert job_id is not None, "a command names <id> before any POST answered a job"
        text = text.replace("<id>", job_id)
    return text


def run(command: Command, base: str, job_id: str | None, cwd: Path, env: dict[str, str]) -> str:
    """Run one command (substituted) in ``cwd``; its output, after asserting it exited 0."""
    text = substituted(command.text, base, job_id)
    # Never the machine's own server or Redis, whatever the README comes to say.
    assert not re.search(r":(8000|6379)\b", text), (command.line, text)
    assert not SERVERS.search(text.lstrip()), (command.line, "starts a server: add to NOT_RUN")
    if command.language == "python":
        argv = [sys.executable, "-c", text]
    else:
        argv = ["bash", "-c", "set -o pipefail\n" + text]
    done = subprocess.run(argv, cwd=cwd, env=env, capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, (command.line, text, done.stdout[-2000:], done.stderr[-2000:])
    return done.stdout + done.stderr


def environment(base: str, redis_server: str) -> dict[str, str]:
    """The commands' environment: no LACUNA_* of the developer's shell; the test's server and
    its Redis. The venv is not on PATH, as after ``make serve``: the README says
    ``.venv/bin/lacuna`` where it means to run it."""
    env = {name: value for name, value in os.environ.items() if not name.startswith("LACUNA_")}
    env["LACUNA_URL"] = base
    env["LACUNA_REDIS_URL"] = with_database(redis_server, E2E_DB)
    venv = str(Path(LACUNA).parent)
    env["PATH"] = os.pathsep.join(p for p in env.get("PATH", "").split(os.pathsep) if p != venv)
    return env


def test_parsing_keeps_commands_whole() -> None:
    # A meta-test of the splitter on the shapes README.md uses.
    body = "\n".join(
        [
            "# a comment",
            "cat > a.json <<'JSON'",
            '{"x": 1,',
            ' "y": 2}',
            "JSON",
            "curl -s -X POST host/v1 -H 'A: b' \\",
            "     -d @a.json   # trailing comment",
            "curl -s -d '{",
            '  "multi": "line"}\'',
            "ls demo/",
        ]
    )
    texts = [command.text for command in shell_commands(body, 0)]
    assert len(texts) == 4
    assert texts[0].endswith("JSON") and texts[0].count("\n") == 3
    assert texts[1].startswith("curl") and "@a.json" in texts[1]
    assert texts[2].endswith("'") and texts[3] == "ls demo/"


def test_every_not_run_entry_still_matches_a_command() -> None:
    commands = readme_commands()
    for pattern in NOT_RUN:
        assert any(re.search(pattern, command.text) for command in commands), pattern


def test_readme_commands_run(base: str, redis_server: str, folder: Path) -> None:
    env = environment(base, redis_server)
    job_id = None
    outputs: list[tuple[Command, str]] = []
    for command in readme_commands():
        if not_run_reason(command) is not None:
            continue
        output = run(command, base, job_id, folder, env)
        outputs.append((command, output))
        located = LOCATION.search(output)
        if located and job_id is None:
            job_id = located.group(1)  # the quickstart's job stands for <id>
    ran = [command.text for command, _ in outputs]
    assert len(ran) >= 15, ran  # the README's runnable commands were found at all

    def output_of(pattern: str) -> str:
        return next(out for command, out in outputs if re.search(pattern, command.text))

    # The quickstart: 202 with a Location, then a result of the hexagon with one H1 pair.
    assert re.search(r"^HTTP/\S+ 202", output_of(r"curl -si -X POST .*-d @job.json"), re.M)
    result = json.loads(output_of(r"Prefer: wait=30' \S+/v1/jobs/<id>/result"))
    one_loop = [d["pairs"] for d in result["diagrams"] if d["dim"] == 1]
    assert len(one_loop) == 1 and len(one_loop[0]) == 1, result["diagrams"]
    # The demo data, the Python client and the batch.
    assert {"cells", "images", "masks", "network"} <= {p.name for p in (folder / "demo").iterdir()}
    assert "loops; the longest lives" in output_of(r"lacuna_client import")
    cells = sorted((folder / "demo" / "cells").glob("*.csv"))
    rows = np.load(folder / "results" / "vectors.npy", allow_pickle=False)
    assert rows.shape[0] == len(cells) > 0
    assert all((folder / "results" / (c.name + ".result.json")).exists() for c in cells)
    # The network request of the demo answers its descriptors.
    network = json.loads(output_of(r"-d @demo/network/network-0\.08-0\.6-0\.json"))
    assert network["descriptors"]["cycle_count"] > 0
    # Two cell populations: the tumour square alone, sent as JSON, as a CSV upload and by
    # the command line (Rips edge lengths, common practice: the square's loop is born at its
    # side, 10, and filled at its diagonal).
    for pattern in (r'"labels": \[', r"-F 'data=@cells\.csv'"):
        answer = json.loads(output_of(pattern))
        assert [p["computed"] for p in answer["populations"]] == [False, True], answer
        assert answer["diagrams"][1]["pairs"] == [[10.0, pytest.approx(200**0.5)]]
    batch = json.loads((folder / "cells.csv.result.json").read_text())
    assert batch["diagrams"] == answer["diagrams"]


def test_readme_python_m_commands_run(folder: Path) -> None:
    # Inline `python -m ...` commands of the prose (the README's picture, say) run too.
    # The venv's interpreter, as a fresh clone has it, is the test's own.
    inline = re.findall(r"`((?:\.venv/bin/)?python -m [^`]+)`", README.read_text(encoding="utf-8"))
    assert inline
    for text in inline:
        argv = [sys.executable, *shlex.split(text)[1:]]
        done = subprocess.run(argv, cwd=folder, capture_output=True, text=True, timeout=300)
        assert done.returncode == 0, (text, done.stderr)
        written = re.search(r"--out (\S+\.svg)", text)
        if written is not None:  # a picture: an SVG document
            assert b"<svg" in (folder / written.group(1)).read_bytes()[:1000], text
