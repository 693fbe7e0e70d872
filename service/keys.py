"""API keys of tenants, kept in Redis: created, listed and revoked by ``lacuna keys``.

A key is ``<key id>.<secret>``: the key id (8 hex digits) is public and names the key in
listings and revocations; the secret is ``secrets.token_urlsafe(32)``, 256 random bits. The
key is shown once, at creation; Redis keeps only its SHA-256. A slow password hash (bcrypt,
scrypt, Argon2) exists to make guessing a low-entropy password from a leaked hash expensive;
a 256-bit random secret cannot be guessed at any hash speed (2**256 trials), so one fast
SHA-256 per request is enough (common practice for random API tokens) and the check stays a
single Redis read. The record is found by the digest itself, so how long a lookup takes says
nothing about any key's characters.

Redis keys::

    lacuna:api-key:<sha256 of the key>   hash: key_id, tenant, created_at, revoked ("0"/"1")
    lacuna:api-key-ids                   hash: key_id -> sha256 of the key
    lacuna:tenant:<tenant>               hash: the tenant's quota overrides (service.quotas)

A revoked key stays listed (revoked) and answers 401 from the next request on: nothing caches
a key's record.
"""

import hashlib
import re
import secrets
from dataclasses import dataclass
from datetime import UTC, datetime

from redis import Redis
from rq.utils import as_text

__all__ = [
    "CreatedKey",
    "KeyRecord",
    "KeyStore",
    "PUBLIC_OWNER",
    "TenantNameInvalid",
    "checked_tenant",
    "key_record_name",
    "tenant_record_name",
    "digest_of",
]

_KEY_IDS = "lacuna:api-key-ids"

TENANT_NAME = re.compile(r"[a-z0-9][a-z0-9._-]{0,63}")
"""Tenant names: lower-case letters, digits, '.', '_' and '-'; no ':' so a tenant cannot
reach into another's Redis keys (``lacuna:idempotency:<owner>:<key>``)."""

PUBLIC_OWNER = "public"
"""The owner every request acts for in open mode; no tenant may take the name, or it would
see the jobs made without keys."""


class TenantNameInvalid(ValueError):
    """A tenant name outside TENANT_NAME, or a reserved one."""


def digest_of(key: str) -> str:
    """SHA-256 (hex) of a key: what Redis keeps instead of the key."""
    return hashlib.sha256(key.encode()).hexdigest()


def key_record_name(digest: str) -> str:
    """Redis key of the record of the API key whose SHA-256 is ``digest``."""
    return f"lacuna:api-key:{digest}"


def tenant_record_name(tenant: str) -> str:
    """Redis key of a tenant's quota overrides."""
    return f"lacuna:tenant:{tenant}"


def checked_tenant(tenant: str) -> str:
    """``tenant`` if it is a usable tenant name; TenantNameInvalid saying why not."""
    if not TENANT_NAME.fullmatch(tenant):
        raise TenantNameInvalid(
            f"tenant {tenant!r}: use 1 to 64 lower-case letters, digits, '.', '_' or '-', "
            "starting with a letter or digit"
        )
    if tenant == PUBLIC_OWNER:
        raise TenantNameInvalid(f"tenant {tenant!r} is reserved for open mode")
    return tenant


@dataclass(frozen=True)
class KeyRecord:
    """What is kept of a key: never the key itself."""

    key_id: str
    tenant: str
    created_at: str
    revoked: bool


@dataclass(frozen=True)
class CreatedKey:
    """A key just made: ``key`` is the only copy of the secret there will ever be."""

    key: str
    record: KeyRecord


def _record_of(fields: dict[bytes | str, bytes | str]) -> KeyRecord:
    record = {as_text(k): as_text(v) for k, v in fields.items()}
    return KeyRecord(
        key_id=record["key_id"],
        tenant=record["tenant"],
        created_at=record["created_at"],
        revoked=record["revoked"] == "1",
    )


class KeyStore:
    """The API keys of every tenant, in one Redis."""

    def __init__(self, redis: Redis) -> None:
        self.redis = redis

    def create(self, tenant: str) -> CreatedKey:
        """A new key for ``tenant`` (TenantNameInvalid for a bad name)."""
        checked_tenant(tenant)
        while True:
            key_id = secrets.token_hex(4)
            key = f"{key_id}.{secrets.token_urlsafe(32)}"
            digest = digest_of(key)
            if self.redis.hsetnx(_KEY_IDS, key_id, digest):  # key ids never repeat
                break
        created_at = datetime.now(UTC).isoformat(timespec="seconds")
        record = KeyRecord(key_id=key_id, tenant=tenant, created_at=created_at, revoked=False)
        self.redis.hset(
            key_record_name(digest),
            mapping={"key_id": key_id, "tenant": tenant, "created_at": created_at, "revoked": "0"},
        )
        return CreatedKey(key=key, record=record)

    def list(self) -> list[KeyRecord]:
        """Every key ever created (revoked ones too), oldest first."""
        digests = [as_text(d) for d in self.redis.hvals(_KEY_IDS)]
        with self.redis.pipeline(transaction=False) as pipe:
            for digest in digests:
                pipe.hgetall(key_record_name(digest))
            stored = pipe.execute()
        # An empty record: its id was claimed by a create that did not finish.
        records = [_record_of(fields) for fields in stored if fields]
        return sorted(records, key=lambda record: (record.created_at, record.key_id))

    def revoke(self, key_id: str) -> KeyRecord | None:
        """Revoke the key ``key_id`` (for good); its record, or None if there is no such key."""
        digest = self.redis.hget(_KEY_IDS, key_id)
        if digest is None:
            return None
        name = key_record_name(as_text(digest))
        if not self.redis.exists(name):
            return None
        self.redis.hset(name, "revoked", "1")
        return _record_of(self.redis.hgetall(name))
