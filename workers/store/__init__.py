"""The service's stores: ``open_stores(url)`` gives the check store and the access store of the
Redis or the SQLite implementation (``workers.store.protocols``), sharing one connection."""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

from workers.store.protocols import AccessStore, CheckStore
from workers.store.records import (
    CHECK_STATUSES,
    DEFAULT_RETENTION_S,
    FINAL_STATUSES,
    PRIORITIES,
    UNFINISHED_STATUSES,
    VERDICT_NAMES,
    BatchRecord,
    CheckRecord,
    CheckSource,
    DueCallback,
    NewCheck,
    Priority,
    QuotaExceededError,
    Route,
    StoredRequest,
    Submission,
    TokenRecord,
    UrgentQuotaExceededError,
    VerdictSummary,
)

if TYPE_CHECKING:
    from redis.retry import Retry

__all__ = [
    "CHECK_STATUSES",
    "DEFAULT_RETENTION_S",
    "FINAL_STATUSES",
    "PRIORITIES",
    "UNFINISHED_STATUSES",
    "VERDICT_NAMES",
    "AccessStore",
    "BatchRecord",
    "CheckRecord",
    "CheckSource",
    "CheckStore",
    "DueCallback",
    "NewCheck",
    "Priority",
    "QuotaExceededError",
    "Route",
    "StoredRequest",
    "Stores",
    "Submission",
    "TokenRecord",
    "UrgentQuotaExceededError",
    "VerdictSummary",
    "open_stores",
]


@dataclass(frozen=True)
class Stores:
    """The two stores of one deployment."""

    checks: CheckStore
    access: AccessStore

    def close(self) -> None:
        self.checks.close()
        self.access.close()


def open_stores(
    url: str, *, retention_s: float = DEFAULT_RETENTION_S, prefix: str = "ballast:",
    redis_retry: Retry | None = None,
) -> Stores:
    """A Redis URL (redis://, rediss://, unix://) → the Redis stores on one client (retrying as
    ``redis_retry`` says, see ``redis_backend.connect``); sqlite:///path or a path → the SQLite
    stores on one file (whose busy timeout waits for other writers)."""
    if url.startswith(("redis://", "rediss://", "unix://")):
        from workers.store.redis_backend import RedisAccessStore, RedisCheckStore, connect

        client = connect(url, redis_retry)
        return Stores(
            RedisCheckStore(prefix=prefix, retention_s=retention_s, client=client),
            RedisAccessStore(prefix=prefix, retention_s=retention_s, client=client),
        )
    from workers.store.sqlite_backend import SqliteAccessStore, SqliteCheckStore, SqliteDatabase

    # SQLAlchemy's spelling: sqlite:///relative/path, sqlite:////absolute/path
    database = SqliteDatabase(url.removeprefix("sqlite:///"))
    return Stores(SqliteCheckStore(database=database, retention_s=retention_s),
                  SqliteAccessStore(database=database, retention_s=retention_s))
