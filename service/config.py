"""The HTTP API's settings: defaults, overridable by ``create_app(config)`` or the environment.

Keys (all upper case, in the Flask config):

- ``BALLAST_STORES``: a ``workers.store.Stores`` pair; else ``BALLAST_STORE_URL`` is opened
  (default: the queue's runtime configuration, i.e. Redis when ``BALLAST_REDIS_URL`` is set, else
  SQLite).
- ``BALLAST_ENQUEUE`` (``list[str] -> None``), ``BALLAST_WORKERS_ALIVE`` and
  ``BALLAST_QUEUE_REACHABLE`` (``() -> bool``): the queue's functions, injectable for tests.
- ``BALLAST_MAX_BODY_BYTES``: largest request body accepted (413 above, chunked bodies too).
- ``BALLAST_HEADER_TIMEOUT_S``: how long the HTTP front waits for a request's headers (and keeps
  an idle connection); ``BALLAST_BODY_TIMEOUT_S``: how long a body may take to arrive (408
  after); ``BALLAST_RECEIVE_BUDGET_BYTES``: the bodies one API process holds at once (503 above;
  default four times the body limit). See ``service.front``.
- ``BALLAST_MAX_VARIANTS``: largest batch.
- ``BALLAST_MAX_UNFINISHED``: queued + running checks per tenant (429 above).
- ``BALLAST_RATE_LIMIT`` requests per ``BALLAST_RATE_WINDOW_S`` seconds per tenant (429 above).
- ``BALLAST_CHECK_RATE_LIMIT`` checks created per ``BALLAST_RATE_WINDOW_S`` per tenant (429
  above; a batch counts each of its variants).
- ``BALLAST_MAX_URGENT``: unfinished urgent checks per tenant (429 above; 422 for a batch larger
  than it).
- ``BALLAST_TENANT_LIMITS``: ``{tenant: {"max_unfinished": n, "rate_limit": n,
  "check_rate_limit": n, "max_urgent": n}}`` overrides.
- ``BALLAST_CALLBACK_ALLOW_PRIVATE``: ``1`` lets batch callbacks go to loopback, link-local and
  private addresses (refused with 422 otherwise).
- ``BALLAST_METRICS_TOKEN``: the operators' token for ``GET /metrics`` (unset: 404).
- ``BALLAST_RETENTION_S``: how long checks and batches are kept (default 7 days).
- ``BALLAST_RETRY_AFTER_S``: the polling interval suggested with 202 responses.
"""

from __future__ import annotations

import json
import os
from typing import Any
from urllib.parse import urlsplit, urlunsplit

DEFAULTS: dict[str, Any] = {
    "BALLAST_STORES": None,
    "BALLAST_STORE_URL": None,
    "BALLAST_STORE_PREFIX": "ballast:",
    "BALLAST_ENQUEUE": None,
    "BALLAST_WORKERS_ALIVE": None,
    "BALLAST_QUEUE_REACHABLE": None,
    "BALLAST_MAX_BODY_BYTES": 128 * 1024 * 1024,  # see deploy/README.md, "Body limit"
    "BALLAST_HEADER_TIMEOUT_S": 15.0,
    "BALLAST_BODY_TIMEOUT_S": 120.0,
    "BALLAST_RECEIVE_BUDGET_BYTES": None,
    "BALLAST_MAX_VARIANTS": 10_000,
    "BALLAST_MAX_UNFINISHED": 50_000,
    "BALLAST_RATE_LIMIT": 1_200,
    "BALLAST_RATE_WINDOW_S": 60.0,
    "BALLAST_CHECK_RATE_LIMIT": 20_000,
    "BALLAST_MAX_URGENT": 20,
    "BALLAST_CALLBACK_ALLOW_PRIVATE": False,
    "BALLAST_METRICS_TOKEN": None,
    "BALLAST_WITHDRAW": None,
    "BALLAST_QUEUE_SIZE": None,
    "BALLAST_TENANT_LIMITS": {},
    "BALLAST_RETENTION_S": 7 * 24 * 3600.0,
    "BALLAST_RETRY_AFTER_S": 2,
    "BALLAST_READY_RETRY_AFTER_S": 5,
    "BALLAST_IDEMPOTENCY_PENDING_S": 120.0,
    "BALLAST_PAGE_SIZE": 100,
    "BALLAST_MAX_PAGE_SIZE": 1_000,
}

# Numeric settings that may come from the environment (BALLAST_MAX_BODY_BYTES=…).
_FROM_ENV = {
    "BALLAST_STORE_URL": str,
    "BALLAST_MAX_BODY_BYTES": int,
    "BALLAST_HEADER_TIMEOUT_S": float,
    "BALLAST_BODY_TIMEOUT_S": float,
    "BALLAST_RECEIVE_BUDGET_BYTES": int,
    "BALLAST_MAX_VARIANTS": int,
    "BALLAST_MAX_UNFINISHED": int,
    "BALLAST_RATE_LIMIT": int,
    "BALLAST_RATE_WINDOW_S": float,
    "BALLAST_CHECK_RATE_LIMIT": int,
    "BALLAST_MAX_URGENT": int,
    "BALLAST_METRICS_TOKEN": str,
    "BALLAST_RETENTION_S": float,
    "BALLAST_RETRY_AFTER_S": int,
}


def app_config(overrides: dict[str, Any] | None = None,
               environ: dict[str, str] | None = None) -> dict[str, Any]:
    """Defaults, then the environment, then ``overrides``."""
    env = os.environ if environ is None else environ
    config = dict(DEFAULTS)
    for name, kind in _FROM_ENV.items():
        raw = env.get(name, "").strip()
        if raw:
            config[name] = kind(raw)
    allow = env.get("BALLAST_CALLBACK_ALLOW_PRIVATE", "").strip().lower()
    if allow:
        config["BALLAST_CALLBACK_ALLOW_PRIVATE"] = allow in ("1", "true", "yes")
    limits = env.get("BALLAST_TENANT_LIMITS", "").strip()
    if limits:  # JSON: {"tenant": {"max_unfinished": n, "rate_limit": n}}
        config["BALLAST_TENANT_LIMITS"] = json.loads(limits)
    config.update(overrides or {})
    return config


_LIMIT_SETTINGS = {
    "max_unfinished": "BALLAST_MAX_UNFINISHED",
    "rate_limit": "BALLAST_RATE_LIMIT",
    "check_rate_limit": "BALLAST_CHECK_RATE_LIMIT",
    "max_urgent": "BALLAST_MAX_URGENT",
}


def tenant_limit(config: dict[str, Any], tenant: str, name: str) -> Any:
    """A per-tenant limit (``max_unfinished``, ``rate_limit``, ``check_rate_limit`` or
    ``max_urgent``), falling back to the default."""
    override = (config.get("BALLAST_TENANT_LIMITS") or {}).get(tenant, {})
    if name in override:
        return override[name]
    return config[_LIMIT_SETTINGS[name]]


def printable_url(url: str) -> str:
    """A store or broker URL as it may be printed or logged: its password replaced by ``***``
    (RFC 3986 §3.2.1 userinfo; ``redis://:secret@host/0`` → ``redis://:***@host/0``)."""
    parts = urlsplit(url)
    if parts.password is None:
        return url
    user = parts.username or ""
    host = parts.netloc.rsplit("@", 1)[1]
    return urlunsplit(parts._replace(netloc=f"{user}:***@{host}"))
