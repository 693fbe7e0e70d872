"""Who a request acts for. Every job, result, picture, feature spec, idempotency record and
distance lookup is scoped by this owner: another owner's id is simply not found.

Two access modes (``Settings.auth``, see ``access_of``):

- ``open``: no keys; every request acts for the one owner ``public``. ``lacuna serve``
  chooses it on a loopback address (one user on their own machine; the bind rule is
  ``service.commands.access_decision``, which always sets ``LACUNA_AUTH``).
- ``keys``: a request sends ``Authorization: Bearer <key>`` (RFC 6750 section 2.1) and acts
  for the key's tenant (``service.keys``); without a key, or with an unknown or revoked one,
  it is a 401 with a ``WWW-Authenticate: Bearer`` challenge (RFC 6750 section 3). The app's
  default when ``auth`` is unset: the app cannot know the address gunicorn binds, so run
  other than through ``lacuna serve`` it is never open by accident. (In open mode a key that
  is sent is ignored.)

Either way the tenant's request rate is checked in the same Redis round trip
(``service.quotas.Admission``): a 429 with Retry-After (RFC 6585 section 4). The health
routes (/healthz, /readyz), the OpenAPI document and /metrics need no key and use no rate.
"""

import ipaddress
import math
import re
from typing import Literal

from flask import Flask, Request, g, request

from service.errors import RateLimited, Unauthorized
from service.keys import PUBLIC_OWNER, digest_of, key_record_name
from service.quotas import Admission
from service.settings import Settings

__all__ = ["PUBLIC_OWNER", "access_of", "install", "is_loopback", "owner_of"]

Access = Literal["keys", "open"]

_OPEN_ENDPOINTS = frozenset({"v1.openapi_document", "metrics.scrape"})
"""Endpoints outside the health blueprint that need no key: the API's own description, and
the operator's /metrics (counts across all tenants, no tenant's data; a scraper sends no key)."""

# RFC 6750 section 2.1: credentials = "Bearer" 1*SP b64token; the scheme is case-insensitive
# (RFC 9110 11.1).
_BEARER = re.compile(r"bearer +([A-Za-z0-9\-._~+/]+=*)", re.IGNORECASE)


def is_loopback(host: str) -> bool:
    """Whether listening on ``host`` is reachable from this machine only."""
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:  # a host name other than localhost: it may resolve anywhere
        return False


def access_of(settings: Settings) -> Access:
    """The access mode: ``settings.auth``, keys when unset (see the module docstring)."""
    return settings.auth or "keys"


def owner_of(request: Request) -> str:
    """The owner key jobs of ``request`` are stored and looked up under (set by the
    before-request check ``install`` registers)."""
    owner: str = g.lacuna_owner
    return owner


def _presented_key(request: Request) -> str | None:
    header = request.headers.get("Authorization")
    if header is None:
        return None
    match = _BEARER.fullmatch(header.strip())
    if match is None:  # another scheme, or a malformed token: no Bearer credentials given
        return None
    return match.group(1)


def _admit(admission: Admission, access: Access) -> None:
    if request.blueprint == "health" or request.endpoint in _OPEN_ENDPOINTS:
        return
    key_record = None
    if access == "keys":
        key = _presented_key(request)
        if key is None:
            raise Unauthorized("send an API key: Authorization: Bearer <key> (RFC 6750)")
        key_record = key_record_name(digest_of(key))
    admitted = admission.admit(key_record, PUBLIC_OWNER)
    if admitted.unknown:
        raise Unauthorized("the API key is not known", "invalid_token")
    if admitted.revoked:
        raise Unauthorized("the API key has been revoked", "invalid_token")
    if not admitted.admitted:
        wait_s = max(1, math.ceil(admitted.wait_s))
        raise RateLimited(admitted.tenant, admitted.rate, admitted.burst, wait_s)
    g.lacuna_owner = admitted.tenant


def install(app: Flask, admission: Admission, settings: Settings) -> None:
    """Check every request's key and rate before its view runs."""
    access = access_of(settings)

    @app.before_request
    def _check_access() -> None:
        _admit(admission, access)
