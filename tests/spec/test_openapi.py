"""The committed OpenAPI document is what the models generate, and it is valid OpenAPI 3.1."""

import re
from pathlib import Path

from openapi_spec_validator import validate

from service.openapi import openapi_document, openapi_text

COMMITTED = Path(__file__).resolve().parents[2] / "openapi" / "openapi.json"


def test_committed_document_is_current() -> None:
    assert COMMITTED.read_text(encoding="utf-8") == openapi_text(), (
        "openapi/openapi.json is stale: run `make openapi` and commit it"
    )


def test_document_is_valid_openapi() -> None:
    # Reference validator: openapi-spec-validator (OpenAPI 3.1 meta-schema).
    validate(openapi_document())


def test_every_route_is_documented() -> None:
    from service.app import create_app
    from service.settings import Settings

    app = create_app(Settings(redis_url="redis://127.0.0.1:1/0"))
    documented = {
        (path, method.upper())
        for path, item in openapi_document()["paths"].items()
        for method in item
        if method != "parameters"
    }
    routed = {
        (re.sub(r"<(\w+)>", r"{\1}", rule.rule), method)
        for rule in app.url_map.iter_rules()
        for method in rule.methods or ()
        if method not in {"HEAD", "OPTIONS"}
    }
    assert routed == documented
