"""Bearer API tokens mapped to tenants.

A token is ``blst_`` followed by 32 random bytes in base64url (``secrets.token_urlsafe``); the
prefix makes a leaked token recognisable to secret scanners. Only its SHA-256 hex digest is
stored; the presented token's digest is compared with the stored one by ``hmac.compare_digest``.
"""

from __future__ import annotations

import hashlib
import hmac
import re
import secrets

from workers.store import AccessStore

TOKEN_PREFIX = "blst_"
_TOKEN_SHAPE = re.compile(r"^blst_[A-Za-z0-9_-]{43}$")
_TENANT_SHAPE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$")
DEFAULT_TENANT = "local"


def new_token() -> str:
    """A fresh token: the prefix and 256 random bits."""
    return TOKEN_PREFIX + secrets.token_urlsafe(32)


def hash_token(token: str) -> str:
    return hashlib.sha256(token.encode()).hexdigest()


def looks_like_token(token: str) -> bool:
    return bool(_TOKEN_SHAPE.match(token))


def valid_tenant_name(name: str) -> bool:
    return bool(_TENANT_SHAPE.match(name))


def create_token(store: AccessStore, tenant: str) -> str:
    """Make a token for ``tenant``, store its hash, and return the token (shown once)."""
    if not valid_tenant_name(tenant):
        raise ValueError("tenant names are 1-64 letters, digits, '.', '_' or '-'")
    token = new_token()
    store.put_token(hash_token(token), tenant)
    return token


def tenant_of(store: AccessStore, token: str) -> str | None:
    """The tenant of a presented token, or None (unknown, revoked or malformed)."""
    if not looks_like_token(token):
        return None
    digest = hash_token(token)
    record = store.get_token(digest)
    if record is None or not hmac.compare_digest(record.token_hash, digest):
        return None
    return record.tenant


def ensure_token(store: AccessStore, token: str | None, tenant: str = DEFAULT_TENANT) -> str:
    """The embedded default's token: ``token`` (e.g. ``BALLAST_TOKEN``) registered for ``tenant``
    if it is not yet known, or a new one when ``token`` is None. Returns the usable token."""
    if token is None:
        return create_token(store, tenant)
    if not looks_like_token(token):
        raise ValueError(f"a token is {TOKEN_PREFIX!r} followed by 43 base64url characters")
    if tenant_of(store, token) is None:
        store.put_token(hash_token(token), tenant)
    return token
