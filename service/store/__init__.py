"""The store: ``open_store(url)`` returns the Redis or the SQLite implementation of ``Store``."""

from __future__ import annotations

from service.store.base import (
    CHECK_STATUSES,
    DEFAULT_RETENTION_S,
    FINAL_STATUSES,
    VERDICT_NAMES,
    BatchRecord,
    CheckRecord,
    NewCheck,
    QuotaExceededError,
    Store,
    TokenRecord,
    VerdictSummary,
)

__all__ = [
    "CHECK_STATUSES",
    "DEFAULT_RETENTION_S",
    "FINAL_STATUSES",
    "VERDICT_NAMES",
    "BatchRecord",
    "CheckRecord",
    "NewCheck",
    "QuotaExceededError",
    "Store",
    "TokenRecord",
    "VerdictSummary",
    "open_store",
]


def open_store(
    url: str, *, retention_s: float = DEFAULT_RETENTION_S, prefix: str = "ballast:",
) -> Store:
    """A Redis URL (redis://, rediss://, unix://) → RedisStore; sqlite:///path or path → SQLite."""
    if url.startswith(("redis://", "rediss://", "unix://")):
        from service.store.redis_store import RedisStore

        return RedisStore(url, prefix=prefix, retention_s=retention_s)
    from service.store.sqlite_store import SqliteStore

    # SQLAlchemy's spelling: sqlite:///relative/path, sqlite:////absolute/path
    return SqliteStore(url.removeprefix("sqlite:///"), retention_s=retention_s)
