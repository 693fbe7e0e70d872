"""Imports point one way: the HTTP layer never loads the numerical code, and the client and
the command line load nothing of the server."""

import json
import subprocess
import sys
from pathlib import Path

CORE = Path(__file__).resolve().parents[1] / "workers" / "core"

SERVER_MODULES = [
    "service",
    "workers",
    "flask",
    "werkzeug",
    "rq",
    "redis",
    "pydantic",
    "pydantic_settings",
    "networkx",
    "tifffile",
    "PIL",
    "matplotlib",
    "scipy",
    "gudhi",
    "skimage",
]
"""Our server packages and the libraries of the server extra: the client needs none of them."""

COMMANDS = sorted(
    ["serve", "worker", "demo", "openapi", "keys", "submit", "status", "fetch", "cancel"]
)
"""Every command of ``lacuna``."""

_DONE = "all checks ran"


def run_with_blocked(blocked: list[str], code: str) -> set[str]:
    """Run ``code`` in a fresh interpreter where ``blocked`` modules cannot be imported; the
    top-level names of the modules it had loaded by the end."""
    prelude = f"import sys\nfor name in {blocked!r}: sys.modules[name] = None\n"
    # The last line proves the code ran to its end in this interpreter (not, say, in a
    # program it exec'd, which would exit 0 too).
    epilogue = (
        "\nimport json\n"
        "print(json.dumps(sorted({m.split('.')[0] for m, v in sys.modules.items() if v})))\n"
        f"print({_DONE!r})\n"
    )
    completed = subprocess.run(
        [sys.executable, "-c", prelude + code + epilogue],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert completed.returncode == 0, completed.stderr
    *_, loaded, done = completed.stdout.splitlines()
    assert done == _DONE, completed.stdout
    return set(json.loads(loaded))


def test_service_runs_without_numerical_modules() -> None:
    # With the heavy modules made unimportable the app builds and serves /healthz; if
    # service/ imported any of them (or the client), this would raise ImportError.
    run_with_blocked(
        [
            "ripser",
            "gudhi",
            "scipy",
            "matplotlib",
            "workers.core",
            "workers.jobs",
            "workers.compute",
            "lacuna_client",
        ],
        "from service.app import create_app\n"
        "from service.settings import Settings\n"
        "app = create_app(Settings(redis_url='redis://127.0.0.1:1/0'))\n"
        "assert app.test_client().get('/healthz').status_code == 200\n"
        "import service.commands, service.stack, service.wsgi\n"
        "leaked = sorted(m for m, module in sys.modules.items() if module is not None\n"
        "                and m.startswith('workers.') and not m.startswith('workers.spec'))\n"
        "assert not leaked, f'service imports {leaked}; only workers.spec may be'\n",
    )


def test_core_imports_nothing_of_ours_outside_core() -> None:
    # workers/core is pure: no service, spec, jobs, pictures, Flask, Redis, RQ, pydantic or
    # matplotlib.
    modules = sorted(path.stem for path in CORE.glob("*.py") if path.stem != "__init__")
    assert len(modules) >= 10  # the glob found the package
    run_with_blocked(
        [
            "service",
            "workers.spec",
            "workers.jobs",
            "workers.pictures",
            "flask",
            "redis",
            "rq",
            "pydantic",
            "matplotlib",
        ],
        "".join(f"import workers.core.{name}\n" for name in modules),
    )


def test_the_contract_loads_no_computation() -> None:
    # workers/spec (the input kinds included) is what the API imports: it names the modules
    # that compute (dotted names) but loads none of them.
    run_with_blocked(
        [
            "workers.core",
            "workers.jobs",
            "workers.pictures",
            "workers.compute",
            "gudhi",
            "scipy",
            "matplotlib",
            "flask",
            "redis",
            "rq",
        ],
        "import workers.spec, workers.spec.kinds, workers.spec.failures\n"
        "from workers.spec.jobs import PersistenceTask\n"
        "from workers.spec.kinds import KINDS\n"
        "task = PersistenceTask(type='persistence', filtration=None)\n"
        "named = [kind.worker(task) for kind in KINDS.values()]\n"
        "assert all(name.startswith('workers.jobs.') for name in named), named\n",
    )


HELP = f"""
import contextlib, io, re
import lacuna_client
from lacuna_client.cli import build_parser, main
build_parser()
shown = io.StringIO()
try:
    with contextlib.redirect_stdout(shown):
        main(["--help"])
except SystemExit as done:
    assert done.code == 0, done.code
else:
    raise AssertionError("lacuna --help did not exit")
listed = re.search(r"{{([a-z,]+)}}", shown.getvalue())
assert listed is not None, shown.getvalue()
assert sorted(listed.group(1).split(",")) == {COMMANDS!r}, listed.group(1)
"""


def test_the_command_line_loads_nothing_of_the_server() -> None:
    # A fresh interpreter runs `lacuna --help` (and checks it lists every command).
    loaded = run_with_blocked([], HELP)
    assert loaded.isdisjoint(SERVER_MODULES), sorted(loaded & set(SERVER_MODULES))
    # requests and numpy come with a client command, not with --help (its start-up time).
    assert loaded.isdisjoint({"requests", "numpy", "tqdm"}), sorted(loaded)


def test_the_leak_check_can_fail() -> None:
    # The same check after importing the server's commands names what they load.
    loaded = run_with_blocked([], "import service.commands\n")
    assert {"service", "pydantic", "pydantic_settings"} <= loaded & set(SERVER_MODULES)


def test_client_builds_and_sends_requests_with_the_server_blocked() -> None:
    # Expected bodies: the conventions of lacuna_client/batch.py's docstring (.csv -> points
    # from columns x, y; .npy -> an image uploaded as it is; default filtrations rips for
    # points, cubical for images).
    run_with_blocked(
        SERVER_MODULES,
        """
import pathlib, socket, tempfile
import numpy as np
from lacuna_client import Client, LacunaError
from lacuna_client.batch import BatchOptions, request_of

folder = pathlib.Path(tempfile.mkdtemp())
(folder / "cells.csv").write_text("x,y,population\\n0,0,a\\n1,0.5,b\\n")
summary = {"type": "summary", "dim": 0}
body, data = request_of(folder / "cells.csv", BatchOptions(features=[summary]))
assert data is None
assert body == {
    "input": {"type": "points", "points": [[0.0, 0.0], [1.0, 0.5]]},
    "filtration": {"type": "rips"},
    "features": [summary],
}, body
np.save(folder / "image.npy", np.eye(3), allow_pickle=False)
body, data = request_of(folder / "image.npy", BatchOptions(spacing=[0.5, 0.5], units="um"))
assert data == (folder / "image.npy").read_bytes()
assert body == {
    "input": {"type": "image", "spacing": [0.5, 0.5], "units": "um"},
    "filtration": {"type": "cubical"},
}, body
# A submission goes as far as the network: a port nothing listens on.
with socket.socket() as probe:
    probe.bind(("127.0.0.1", 0))
    port = probe.getsockname()[1]
try:
    Client(f"http://127.0.0.1:{port}", retries=0).submit_image(np.eye(3), {"type": "cubical"})
except LacunaError as error:
    assert error.type == "unreachable", error.problem
else:
    raise AssertionError("nothing listens there")
""",
    )


def test_server_commands_without_the_server_say_how_to_install_it() -> None:
    # As on a client install: the packages are there, the server's libraries are not.
    run_with_blocked(
        ["flask", "rq"],
        """
import contextlib, io
from lacuna_client.cli import PROGRAMS, main
assert set(PROGRAMS) == {"serve", "worker", "demo", "openapi", "keys"}
for command in PROGRAMS:
    said = io.StringIO()
    with contextlib.redirect_stderr(said):
        assert main([command, "--help"]) == 2
    assert len(said.getvalue().splitlines()) == 1, said.getvalue()
    assert "pip install 'lacuna[server]'" in said.getvalue(), said.getvalue()
""",
    )
