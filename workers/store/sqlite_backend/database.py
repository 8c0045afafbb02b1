"""One SQLite file for both stores: schema, a connection per thread and process, write
transactions.

WAL journal, a busy timeout and ``BEGIN IMMEDIATE`` write transactions make it safe across
processes; ``synchronous=FULL`` keeps every accepted (202) check across a crash or restart.
A connection is never carried across ``fork``.
"""

from __future__ import annotations

import os
import sqlite3
import threading
import time
from collections.abc import Callable, Iterator
from contextlib import AbstractContextManager, contextmanager

from workers.private_files import private_sqlite_file
from workers.store.records import DEFAULT_RETENTION_S

SCHEMA = """
CREATE TABLE IF NOT EXISTS checks (
    id TEXT PRIMARY KEY,
    tenant TEXT NOT NULL,
    status TEXT NOT NULL,
    created_at REAL NOT NULL,
    updated_at REAL NOT NULL,
    queued_at REAL,
    attempts INTEGER NOT NULL DEFAULT 0,
    batch_id TEXT,
    seq INTEGER NOT NULL DEFAULT 0,
    label TEXT,
    started_at REAL,
    finished_at REAL,
    lease_expires_at REAL,
    request BLOB NOT NULL,
    encoding TEXT,
    shared TEXT,
    verdict TEXT,
    verdict_name TEXT,
    unstable_count INTEGER,
    first_frequency_hz REAL,
    first_node TEXT,
    error TEXT,
    extends TEXT,
    priority TEXT NOT NULL DEFAULT 'normal',
    request_id TEXT,
    worker TEXT
);
CREATE INDEX IF NOT EXISTS checks_tenant_status ON checks (tenant, status);
CREATE INDEX IF NOT EXISTS checks_batch_seq ON checks (batch_id, seq);
CREATE INDEX IF NOT EXISTS checks_status_lease ON checks (status, lease_expires_at);
CREATE INDEX IF NOT EXISTS checks_status_queued ON checks (status, queued_at);
CREATE INDEX IF NOT EXISTS checks_updated ON checks (updated_at);
CREATE TABLE IF NOT EXISTS batches (
    id TEXT PRIMARY KEY,
    tenant TEXT NOT NULL,
    created_at REAL NOT NULL,
    label TEXT,
    size INTEGER NOT NULL,
    priority TEXT NOT NULL DEFAULT 'normal',
    callback_url TEXT,
    callback_status TEXT,
    callback_attempts INTEGER NOT NULL DEFAULT 0,
    callback_next_at REAL,
    callback_error TEXT
);
CREATE INDEX IF NOT EXISTS batches_tenant_created ON batches (tenant, created_at);
CREATE TABLE IF NOT EXISTS blobs (
    hash TEXT PRIMARY KEY,
    body BLOB NOT NULL,
    created_at REAL NOT NULL
);
CREATE TABLE IF NOT EXISTS tokens (
    hash TEXT PRIMARY KEY,
    tenant TEXT NOT NULL,
    created_at REAL NOT NULL
);
CREATE TABLE IF NOT EXISTS idempotency (
    tenant TEXT NOT NULL,
    key TEXT NOT NULL,
    body_hash TEXT NOT NULL,
    check_id TEXT,
    expires_at REAL NOT NULL,
    PRIMARY KEY (tenant, key)
);
CREATE TABLE IF NOT EXISTS tenants (
    tenant TEXT PRIMARY KEY
);
CREATE TABLE IF NOT EXISTS webhook_secrets (
    tenant TEXT PRIMARY KEY,
    current TEXT NOT NULL,
    previous TEXT,
    previous_until REAL
);
CREATE TABLE IF NOT EXISTS rates (
    tenant TEXT NOT NULL,
    bucket INTEGER NOT NULL,
    hits INTEGER NOT NULL,
    PRIMARY KEY (tenant, bucket)
);
"""
# Columns a file made by an earlier version lacks (its checks then read as of unknown encoding,
# normal priority, no callback), and the indexes on them, made once they are there.
ADDED_COLUMNS = {
    "checks": ("encoding TEXT", "shared TEXT", "priority TEXT NOT NULL DEFAULT 'normal'",
               "request_id TEXT", "worker TEXT", "extends TEXT"),
    "batches": ("priority TEXT NOT NULL DEFAULT 'normal'", "callback_url TEXT",
                "callback_status TEXT", "callback_attempts INTEGER NOT NULL DEFAULT 0",
                "callback_next_at REAL", "callback_error TEXT"),
}
ADDED_INDEXES = (
    "CREATE INDEX IF NOT EXISTS batches_callback ON batches (callback_status, callback_next_at)",
)


class SqliteDatabase:
    """The store file at ``path``: safe for several processes and threads."""

    def __init__(self, path: str | os.PathLike[str], busy_timeout_s: float = 30.0) -> None:
        self.path = os.fspath(path)
        self.busy_timeout_s = busy_timeout_s
        self._local = threading.local()
        os.makedirs(os.path.dirname(os.path.abspath(self.path)), exist_ok=True)
        private_sqlite_file(self.path)  # every tenant's data: 0600 (workers.private_files)
        conn = self.conn()
        conn.executescript(SCHEMA)
        for table, columns in ADDED_COLUMNS.items():
            present = {row[1] for row in conn.execute(f"PRAGMA table_info({table})")}
            for column in columns:
                if column.split()[0] not in present:
                    conn.execute(f"ALTER TABLE {table} ADD COLUMN {column}")
        for statement in ADDED_INDEXES:
            conn.execute(statement)

    def conn(self) -> sqlite3.Connection:
        """This thread's connection (a new one after a fork)."""
        conn = getattr(self._local, "conn", None)
        if conn is not None and getattr(self._local, "pid", None) == os.getpid():
            return conn
        conn = sqlite3.connect(
            self.path, timeout=self.busy_timeout_s, isolation_level=None, check_same_thread=False,
        )
        conn.row_factory = sqlite3.Row
        conn.execute(f"PRAGMA busy_timeout = {int(self.busy_timeout_s * 1000)}")
        conn.execute("PRAGMA journal_mode = WAL")
        conn.execute("PRAGMA synchronous = FULL")
        conn.execute("PRAGMA foreign_keys = ON")
        self._local.conn = conn
        self._local.pid = os.getpid()
        return conn

    @contextmanager
    def write(self) -> Iterator[sqlite3.Connection]:
        """One write transaction, taken up front (``BEGIN IMMEDIATE``) so it cannot deadlock."""
        conn = self.conn()
        conn.execute("BEGIN IMMEDIATE")
        try:
            yield conn
        except BaseException:
            conn.execute("ROLLBACK")
            raise
        conn.execute("COMMIT")

    def close(self) -> None:
        conn = getattr(self._local, "conn", None)
        if conn is not None and getattr(self._local, "pid", None) == os.getpid():
            conn.close()
        self._local.conn = None

    def ping(self) -> bool:
        try:
            self.conn().execute("SELECT 1").fetchone()
        except sqlite3.Error:
            return False
        return True


class SqliteBase:
    """A store in a SQLite file: ``path`` (a new :class:`SqliteDatabase`) or ``database``."""

    def __init__(
        self, path: str | os.PathLike[str] | None = None, *,
        database: SqliteDatabase | None = None, retention_s: float = DEFAULT_RETENTION_S,
        busy_timeout_s: float = 30.0, clock: Callable[[], float] = time.time,
    ) -> None:
        if database is None:
            if path is None:
                raise ValueError("give the store file's path or an open database")
            database = SqliteDatabase(path, busy_timeout_s)
        self.db = database
        self.path = database.path
        self.retention_s = float(retention_s)
        self.clock = clock

    def _conn(self) -> sqlite3.Connection:
        return self.db.conn()

    def _write(self) -> AbstractContextManager[sqlite3.Connection]:
        return self.db.write()

    def ping(self) -> bool:
        return self.db.ping()

    def close(self) -> None:
        self.db.close()
