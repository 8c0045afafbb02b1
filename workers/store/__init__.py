"""The service's stores: ``open_stores(url)`` gives the check store and the access store of the
Redis or the SQLite implementation (``workers.store.protocols``), sharing one connection."""

from __future__ import annotations

from dataclasses import dataclass

from workers.store.protocols import AccessStore, CheckStore
from workers.store.records import (
    CHECK_STATUSES,
    DEFAULT_RETENTION_S,
    FINAL_STATUSES,
    UNFINISHED_STATUSES,
    VERDICT_NAMES,
    BatchRecord,
    CheckRecord,
    CheckSource,
    NewCheck,
    QuotaExceededError,
    StoredRequest,
    TokenRecord,
    VerdictSummary,
)

__all__ = [
    "CHECK_STATUSES",
    "DEFAULT_RETENTION_S",
    "FINAL_STATUSES",
    "UNFINISHED_STATUSES",
    "VERDICT_NAMES",
    "AccessStore",
    "BatchRecord",
    "CheckRecord",
    "CheckSource",
    "CheckStore",
    "NewCheck",
    "QuotaExceededError",
    "StoredRequest",
    "Stores",
    "TokenRecord",
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
) -> Stores:
    """A Redis URL (redis://, rediss://, unix://) → the Redis stores on one client;
    sqlite:///path or a path → the SQLite stores on one file."""
    if url.startswith(("redis://", "rediss://", "unix://")):
        from workers.store.redis_backend import RedisAccessStore, RedisCheckStore, connect

        client = connect(url)
        return Stores(
            RedisCheckStore(prefix=prefix, retention_s=retention_s, client=client),
            RedisAccessStore(prefix=prefix, retention_s=retention_s, client=client),
        )
    from workers.store.sqlite_backend import SqliteAccessStore, SqliteCheckStore, SqliteDatabase

    # SQLAlchemy's spelling: sqlite:///relative/path, sqlite:////absolute/path
    database = SqliteDatabase(url.removeprefix("sqlite:///"))
    return Stores(SqliteCheckStore(database=database, retention_s=retention_s),
                  SqliteAccessStore(database=database, retention_s=retention_s))
