"""The stores in one SQLite file: the embedded default, shared by API and worker processes.

Tables: ``checks`` (records, the stored request's bytes and encoding, the hashes of the batch's
shared bytes), ``batches``, ``blobs`` (shared bytes by SHA-256, stored once), ``tokens``,
``idempotency`` and ``rates``. Status changes are compare-and-set:
``UPDATE … WHERE id=? AND status=?``.
"""

from workers.store.sqlite_backend.access import SqliteAccessStore
from workers.store.sqlite_backend.checks import SqliteCheckStore
from workers.store.sqlite_backend.database import SqliteDatabase

__all__ = ["SqliteAccessStore", "SqliteCheckStore", "SqliteDatabase"]
