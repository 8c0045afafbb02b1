"""Who is asking: the bearer token's tenant, its request rate, and the app's stores and queue."""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

from flask import current_app, g, request

from service.auth import tenant_of
from service.config import tenant_limit
from service.problems import abort_problem
from workers.store import AccessStore, CheckStore

BEARER_CHALLENGE = 'Bearer realm="ballast"'


def check_store() -> CheckStore:
    return current_app.extensions["ballast"]["stores"].checks


def access_store() -> AccessStore:
    return current_app.extensions["ballast"]["stores"].access


def queue_function(name: str) -> Callable[..., Any]:
    return current_app.extensions["ballast"][name]


def tenant() -> str:
    return g.tenant


def retry_after(seconds: float) -> str:
    return str(max(1, math.ceil(seconds)))


def bearer_tenant(authorization: str, access: AccessStore) -> str:
    """The tenant of an ``Authorization: Bearer`` header's token (RFC 6750); raises the 401
    ``Problem``. Used by :func:`authenticate` and, before any body is read, by the body gate
    (``service.api.body_gate``)."""
    scheme, _, token = authorization.partition(" ")
    if scheme.lower() != "bearer" or not token.strip():
        abort_problem(401, "send the API token as 'Authorization: Bearer <token>'",
                      kind="unauthenticated", headers={"WWW-Authenticate": BEARER_CHALLENGE})
    found = tenant_of(access, token.strip())
    if found is None:
        abort_problem(401, "the token is unknown or revoked", kind="unauthenticated",
                      headers={"WWW-Authenticate": BEARER_CHALLENGE + ', error="invalid_token"'})
    return found


def authenticate() -> None:
    """``before_request`` of the /v1 blueprints: 401 without a valid token, 429 over the rate."""
    found = bearer_tenant(request.headers.get("Authorization", ""), access_store())
    g.tenant = found
    config = current_app.config
    limit = int(tenant_limit(config, found, "rate_limit"))
    window = float(config["BALLAST_RATE_WINDOW_S"])
    wait = access_store().hit_rate(found, window, limit)
    if wait > 0:
        abort_problem(429, f"more than {limit} requests in {window:g} s; slow down",
                      kind="rate-limited", headers={"Retry-After": retry_after(wait)})
