"""docker/: no Docker engine runs here, so the files are checked for what can be checked
without one: compose.yaml parses (YAML, PyYAML as the reference parser), names redis, the API
and two workers with health checks wired to /readyz, publishes the API on loopback only, runs
Redis with its append-only file on a named volume, and every command it runs is one the
lacuna command line accepts; the Dockerfile's base is pinned, it copies every package the
project installs, installs the server and runs as a non-root user."""

import re
import tomllib
from pathlib import Path
from typing import Any

import pytest
import yaml

from lacuna_client.cli import PROGRAMS
from service.commands import build_parser
from service.settings import Settings
from service.stack import redis_arguments
from workers.runner import worker_parser
from workers.settings import WorkerSettings

ROOT = Path(__file__).resolve().parents[1]
DOCKER = ROOT / "docker"


@pytest.fixture(scope="module")
def compose() -> dict[str, Any]:
    document: dict[str, Any] = yaml.safe_load((DOCKER / "compose.yaml").read_text())
    return document


def accepts(command: list[str]) -> None:
    """Parse ``command`` with the parser of the program the lacuna command line would run
    (SystemExit, which argparse raises on an unknown command or option, fails the test)."""
    assert command[0] == "lacuna"
    program = PROGRAMS[command[1]]  # a KeyError for a command lacuna does not run
    if program.module == "workers":
        worker_parser(WorkerSettings()).parse_args(command[2:])
    else:
        assert program.module == "service"  # the only other program compose runs
        build_parser(Settings()).parse_args([*program.arguments, *command[2:]])


def test_compose_has_redis_an_api_and_two_workers(compose: dict[str, Any]) -> None:
    services = compose["services"]
    assert "redis" in services and "api" in services
    workers = [
        s for s in services.values() if s.get("command", [None, None])[:2] == ["lacuna", "worker"]
    ]
    assert len(workers) == 2
    for service in (services["api"], *workers):
        assert service["depends_on"]["redis"]["condition"] == "service_healthy"
        assert service["environment"]["LACUNA_REDIS_URL"].startswith("redis://redis:")


def test_health_checks_are_wired_to_readyz(compose: dict[str, Any]) -> None:
    api = compose["services"]["api"]
    assert any("/readyz" in part for part in api["healthcheck"]["test"])
    port = api["command"][api["command"].index("--port") + 1]
    assert f"127.0.0.1:{port}/readyz" in " ".join(api["healthcheck"]["test"])
    assert api["ports"] == [f"127.0.0.1:{port}:{port}"]
    assert "redis-cli" in compose["services"]["redis"]["healthcheck"]["test"]


def _published_address(port: str) -> tuple[str, str, str]:
    """(host ip, host port, container port) of a ports entry in the short syntax of the
    Compose Specification, "[HOST:]CONTAINER" or "HOST_IP:HOST_PORT:CONTAINER"; an entry
    without a host ip is published on every interface (0.0.0.0)."""
    parts = port.rsplit(":", 2)
    if len(parts) == 3:
        return parts[0], parts[1], parts[2]
    if len(parts) == 2:
        return "0.0.0.0", parts[0], parts[1]
    return "0.0.0.0", parts[0], parts[0]


def test_every_published_port_is_on_loopback(compose: dict[str, Any]) -> None:
    published = [p for s in compose["services"].values() for p in s.get("ports", [])]
    assert published, "the API publishes its port"
    for port in published:
        assert isinstance(port, str), "the short syntax, so the host ip is visible in one place"
        assert _published_address(port)[0] == "127.0.0.1", port
    # The parser above must see what Compose sees: a bare "8000:8000" is all interfaces.
    assert _published_address("8000:8000")[0] == "0.0.0.0"
    assert _published_address("8000")[0] == "0.0.0.0"


def _options(arguments: list[str]) -> dict[str, str]:
    """redis-server's command-line options ("--name value" pairs, as redis.conf directives)."""
    found: dict[str, str] = {}
    for i, word in enumerate(arguments):
        if word.startswith("--"):
            found[word[2:]] = arguments[i + 1]
    return found


def test_redis_keeps_an_append_only_file_on_a_named_volume(compose: dict[str, Any]) -> None:
    redis = compose["services"]["redis"]
    assert redis["command"][0] == "redis-server"
    options = _options(redis["command"][1:])
    # redis.conf: appendonly yes turns the AOF on; appendfsync everysec fsyncs once a second.
    assert options["appendonly"] == "yes"
    assert options["appendfsync"] == "everysec"
    assert options["dir"] == "/data"
    volume, _, target = redis["volumes"][0].partition(":")
    assert target == options["dir"]
    assert volume in compose["volumes"], "a named volume (a bare path would be a bind mount)"
    assert redis["restart"] == "unless-stopped"


def test_the_embedded_redis_persists_like_the_container(
    compose: dict[str, Any], tmp_path: Path
) -> None:
    embedded = _options(redis_arguments(tmp_path, tmp_path / "redis.sock"))
    container = _options(compose["services"]["redis"]["command"][1:])
    for option in ("appendonly", "appendfsync", "save"):
        assert embedded[option] == container[option], option
    assert embedded["dir"] == str(tmp_path)


def test_the_image_names_a_data_directory_settings_read(monkeypatch: pytest.MonkeyPatch) -> None:
    text = (DOCKER / "Dockerfile").read_text()
    found = re.search(r"^ENV LACUNA_DATA_DIR=(\S+)$", text, re.MULTILINE)
    assert found is not None
    assert found.group(1).startswith("/home/lacuna/"), "inside the home of the image's user"
    monkeypatch.setenv("LACUNA_DATA_DIR", found.group(1))
    assert Settings().data_dir == Path(found.group(1))


def test_every_command_is_one_the_cli_accepts(compose: dict[str, Any]) -> None:
    commands = [s["command"] for s in compose["services"].values() if s["command"][0] == "lacuna"]
    assert len(commands) == 3
    for command in commands:
        accepts(command)


def test_an_unknown_option_would_be_caught() -> None:
    # The check above must be able to fail: argparse refuses what the CLI does not know.
    with pytest.raises(SystemExit):
        accepts(["lacuna", "serve", "--no-such-option"])
    with pytest.raises(SystemExit):
        accepts(["lacuna", "worker", "--no-such-option"])


def test_dockerfile_pins_its_base_runs_as_a_user_and_runs_lacuna() -> None:
    text = (DOCKER / "Dockerfile").read_text()
    bases = re.findall(r"^FROM (\S+)", text, re.MULTILINE)
    assert bases and all(re.fullmatch(r"python:\d+\.\d+\.\d+-slim-\w+( AS \w+)?", b) for b in bases)
    users = re.findall(r"^USER (\S+)", text, re.MULTILINE)
    assert users and users[-1] not in ("root", "0")
    cmd = re.search(r"^CMD (\[.*\])$", text, re.MULTILINE)
    assert cmd is not None
    accepts(yaml.safe_load(cmd.group(1)))  # a JSON array is YAML too


def test_dockerfile_copies_every_package_and_installs_the_server() -> None:
    # The packages pyproject.toml installs (lacuna_client holds the lacuna command itself)
    # must all be in the image, and the image is the server: lacuna[server].
    text = (DOCKER / "Dockerfile").read_text()
    found = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]
    packages = [pattern.rstrip("*") for pattern in found["packages"]["find"]["include"]]
    assert "lacuna_client" in packages
    copied = re.findall(r"^COPY (\S+) (\S+)$", text, re.MULTILINE)
    for package in packages:
        assert (package, package) in copied, f"the Dockerfile does not copy {package}/"
    installs = re.findall(r"pip install .*$", text, re.MULTILINE)
    assert any("'lacuna[server]'" in line for line in installs), installs
