"""``python -m service serve|openapi|keys``: the server's own commands, which ``lacuna serve``,
``lacuna openapi`` and ``lacuna keys`` run (the ``lacuna`` command itself imports nothing of
the server)."""

import argparse
import json
import os
import sys
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Literal

from service.settings import Settings

__all__ = ["AccessDecision", "access_decision", "build_parser", "main"]

USAGE = 2


@dataclass(frozen=True)
class AccessDecision:
    """How ``lacuna serve`` runs: ``access`` ("keys" or "open"), or None when it refuses to
    start; ``message`` is the line to print (a warning, or why it refuses)."""

    access: Literal["keys", "open"] | None
    message: str | None = None


def access_decision(
    host: str, auth: Literal["keys", "open"] | None, open_access: bool
) -> AccessDecision:
    """The bind rule: open access (no keys) only on a loopback address, unless
    ``open_access`` says so explicitly; any other address defaults to keys."""
    from service.auth import is_loopback

    if auth == "keys":
        return AccessDecision("keys")
    if is_loopback(host):
        return AccessDecision("open")
    if open_access:
        return AccessDecision(
            "open",
            f"WARNING: open access on {host}: no API keys are checked, so anyone who can "
            "reach this port reads, cancels and submits every job",
        )
    if auth == "open":
        return AccessDecision(
            None,
            f"lacuna serve: refusing open access (auth=open) on {host}, which is not a "
            "loopback address: drop --auth open to require API keys, or add --open-access "
            "to let anyone who can reach the port use every job",
        )
    return AccessDecision(
        "keys",
        f"API keys required on {host}: create them with `lacuna keys create --tenant NAME "
        "--redis URL` against the Redis this server uses",
    )


def _serve(args: argparse.Namespace, settings: Settings) -> int:
    from service.stack import StackOptions, run_stack

    decision = access_decision(args.host, args.auth, args.open_access)
    if decision.message is not None:
        sys.stderr.write(decision.message + "\n")
    if decision.access is None:
        return USAGE
    # The API processes read their settings from the environment they inherit.
    os.environ["LACUNA_AUTH"] = decision.access
    os.environ["LACUNA_HOST"] = args.host
    return run_stack(
        StackOptions(
            host=args.host,
            port=args.port,
            redis_url=args.redis,
            http_workers=args.http_workers,
            threads=args.threads,
            local_workers=args.local_workers,
            queue=settings.queue,
            # a waiting request must not be killed as a stuck worker
            http_timeout_s=settings.max_wait_s + 60,
            data_dir=args.data_dir,
        )
    )


def _openapi(args: argparse.Namespace) -> int:
    from service.openapi import openapi_text

    text = openapi_text()
    if args.out is None:
        sys.stdout.write(text)
    else:
        Path(args.out).write_text(text, encoding="utf-8")
    return 0


def _keys(args: argparse.Namespace) -> int:
    from redis import Redis

    from service.keys import KeyStore, TenantNameInvalid, checked_tenant
    from service.quotas import QUOTA_OVERRIDES, quotas_of, set_overrides

    if args.redis is None:
        sys.stderr.write(
            "lacuna keys: name the Redis the server uses: --redis URL (or LACUNA_REDIS_URL)\n"
        )
        return USAGE
    redis = Redis.from_url(args.redis)
    store = KeyStore(redis)
    if args.action == "list":
        records = store.list()
        if args.json:
            sys.stdout.write(json.dumps([asdict(record) for record in records]) + "\n")
        for record in [] if args.json else records:
            state = "revoked" if record.revoked else "active"
            sys.stdout.write(f"{record.key_id}  {record.tenant}  {record.created_at}  {state}\n")
        return 0
    if args.action == "revoke":
        revoked = store.revoke(args.key_id)
        if revoked is None:
            sys.stderr.write(f"lacuna keys revoke: no key {args.key_id!r}\n")
            return 1
        sys.stdout.write(f"revoked {revoked.key_id} of tenant {revoked.tenant}\n")
        return 0
    try:
        tenant = checked_tenant(args.tenant)
    except TenantNameInvalid as error:
        sys.stderr.write(f"lacuna keys {args.action}: {error}\n")
        return USAGE
    overrides = {name: getattr(args, name) for name in QUOTA_OVERRIDES}
    try:
        set_overrides(redis, tenant, {k: v for k, v in overrides.items() if v is not None})
    except ValueError as error:
        sys.stderr.write(f"lacuna keys {args.action}: {error}\n")
        return USAGE
    set_overrides(redis, tenant, dict.fromkeys(args.clear or []))
    if args.action == "quotas":
        quotas = quotas_of(redis, args.settings, tenant)
        sys.stdout.write(json.dumps({"tenant": tenant, **quotas.model_dump()}) + "\n")
        return 0
    created = store.create(tenant)
    if args.json:
        sys.stdout.write(json.dumps({"key": created.key, **asdict(created.record)}) + "\n")
        return 0
    sys.stdout.write(
        f"tenant:  {created.record.tenant}\nkey id:  {created.record.key_id}\n"
        f"key:     {created.key}\n"
        "The key is shown only now (the server keeps its SHA-256): hand it to the tenant, who "
        "sets LACUNA_API_KEY or passes --api-key.\n"
    )
    return 0


def _keys_parser(
    commands: "argparse._SubParsersAction[argparse.ArgumentParser]", settings: Settings
) -> None:
    from service.quotas import QUOTA_OVERRIDES

    keys = commands.add_parser(
        "keys",
        help="create, list and revoke API keys of tenants",
        description="Create, list and revoke the API keys of tenants and set their quotas, in "
        "the Redis the server uses (--redis). A key is printed once, when it is made.",
    )
    actions = keys.add_subparsers(dest="action", required=True)
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument(
        "--redis",
        default=settings.redis_url,
        help="the Redis URL the server uses (LACUNA_REDIS_URL)",
    )
    common.add_argument("--json", action="store_true", help="machine-readable output")
    quota_options = argparse.ArgumentParser(add_help=False, parents=[common])
    for name, kind in QUOTA_OVERRIDES.items():
        quota_options.add_argument(
            "--" + name.replace("_", "-"),
            dest=name,
            type=kind,
            default=None,
            help=f"override the tenant's {name} (default LACUNA_{name.upper()}: "
            f"{getattr(settings, name)})",
        )
    quota_options.add_argument(
        "--clear",
        nargs="+",
        metavar="QUOTA",
        choices=list(QUOTA_OVERRIDES),
        help=f"drop these overrides, back to the defaults ({', '.join(QUOTA_OVERRIDES)})",
    )
    create = actions.add_parser(
        "create", parents=[quota_options], help="a new key for a tenant (shown once)"
    )
    create.add_argument("--tenant", required=True, help="tenant name, e.g. imaging-lab")
    quotas = actions.add_parser(
        "quotas", parents=[quota_options], help="show or set a tenant's quota overrides"
    )
    quotas.add_argument("--tenant", required=True, help="tenant name")
    actions.add_parser(
        "list", parents=[common], help="every key: id, tenant, created, active or revoked"
    )
    revoke = actions.add_parser(
        "revoke", parents=[common], help="revoke a key for good, by its key id"
    )
    revoke.add_argument("key_id", help="the part of the key before the dot")


def build_parser(settings: Settings) -> argparse.ArgumentParser:
    """The ``serve``, ``openapi`` and ``keys`` parsers, their defaults from ``settings``."""
    parser = argparse.ArgumentParser(
        prog="lacuna", description="The lacuna server's programs: serve, openapi, keys."
    )
    commands = parser.add_subparsers(dest="command", required=True)

    serve = commands.add_parser(
        "serve",
        help="run the HTTP API, workers and (if needed) Redis",
        description="Run the HTTP API and job workers on this machine, with an embedded Redis "
        "unless --redis names one. Ctrl-C or SIGTERM stops everything it started.",
    )
    serve.add_argument(
        "--redis",
        default=settings.redis_url,
        help="shared Redis URL (LACUNA_REDIS_URL); unset: embedded Redis",
    )
    serve.add_argument(
        "--data-dir",
        type=Path,
        default=settings.data_dir,
        help="folder the embedded Redis keeps its append-only file in (LACUNA_DATA_DIR); "
        "unset: $XDG_STATE_HOME/lacuna or ~/.local/state/lacuna",
    )
    serve.add_argument("--host", default=settings.host, help="listen address (LACUNA_HOST)")
    serve.add_argument("--port", type=int, default=settings.port, help="port (LACUNA_PORT)")
    serve.add_argument(
        "--http-workers",
        type=int,
        default=settings.http_workers,
        help="HTTP server processes (LACUNA_HTTP_WORKERS)",
    )
    serve.add_argument(
        "--threads",
        type=int,
        default=settings.http_threads,
        help="threads per HTTP server process (LACUNA_HTTP_THREADS)",
    )
    serve.add_argument(
        "--local-workers",
        type=int,
        default=settings.local_workers,
        help="job workers started on this machine, 0: API only (LACUNA_LOCAL_WORKERS)",
    )

    serve.add_argument(
        "--auth",
        choices=["keys", "open"],
        default=settings.auth,
        help="keys: requests need an API key; open: no keys, one owner (LACUNA_AUTH; "
        "default: open on a loopback --host, keys otherwise)",
    )
    serve.add_argument(
        "--open-access",
        action="store_true",
        default=settings.open_access,
        help="allow open access on a non-loopback --host: anyone who can reach it uses every "
        "job (LACUNA_OPEN_ACCESS)",
    )

    openapi = commands.add_parser(
        "openapi",
        help="print or write the OpenAPI document",
        description="Print the OpenAPI document of this version of the API, or write it.",
    )
    openapi.add_argument("--out", default=None, help="file to write (default: stdout)")
    _keys_parser(commands, settings)
    return parser


def main(argv: list[str] | None = None) -> int:
    settings = Settings()
    args = build_parser(settings).parse_args(argv)
    if args.command == "serve":
        return _serve(args, settings)
    if args.command == "keys":
        args.settings = settings
        return _keys(args)
    return _openapi(args)
