"""Imports point one way: the HTTP layer never loads the numerical code."""

import subprocess
import sys
from pathlib import Path

CORE = Path(__file__).resolve().parents[1] / "workers" / "core"


def run_with_blocked(blocked: list[str], code: str) -> None:
    """Run ``code`` in a fresh interpreter where ``blocked`` modules cannot be imported."""
    prelude = f"import sys\nfor name in {blocked!r}: sys.modules[name] = None\n"
    completed = subprocess.run(
        [sys.executable, "-c", prelude + code], capture_output=True, text=True
    )
    assert completed.returncode == 0, completed.stderr


def test_service_runs_without_numerical_modules() -> None:
    # With the heavy modules made unimportable the app builds and serves /healthz; if
    # service/ imported any of them, this would raise ImportError.
    run_with_blocked(
        [
            "ripser",
            "gudhi",
            "scipy",
            "matplotlib",
            "workers.core",
            "workers.jobs",
            "workers.compute",
        ],
        "from service.app import create_app\n"
        "from service.settings import Settings\n"
        "app = create_app(Settings(redis_url='redis://127.0.0.1:1/0'))\n"
        "assert app.test_client().get('/healthz').status_code == 200\n"
        "import service.cli, service.stack, service.wsgi\n"
        "leaked = sorted(m for m, module in sys.modules.items() if module is not None\n"
        "                and m.startswith('workers.') and not m.startswith('workers.spec'))\n"
        "assert not leaked, f'service imports {leaked}; only workers.spec may be'\n",
    )


def test_core_imports_nothing_of_ours_outside_core() -> None:
    # workers/core is pure: no service, spec, Flask, Redis, RQ or pydantic.
    modules = sorted(path.stem for path in CORE.glob("*.py") if path.stem != "__init__")
    assert len(modules) >= 10  # the glob found the package
    run_with_blocked(
        ["service", "workers.spec", "flask", "redis", "rq", "pydantic"],
        "".join(f"import workers.core.{name}\n" for name in modules),
    )
