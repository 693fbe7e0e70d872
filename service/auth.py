"""Who a request acts for. Every job lookup is scoped by this owner key.

There is no authentication yet: every request acts for the shared owner ``public``. Adding API
keys or tenants means deriving the owner here; storage and lookups already honour it.
"""

from flask import Request

__all__ = ["owner_of", "PUBLIC_OWNER"]

PUBLIC_OWNER = "public"


def owner_of(request: Request) -> str:
    """The owner key jobs of ``request`` are stored and looked up under."""
    return PUBLIC_OWNER
