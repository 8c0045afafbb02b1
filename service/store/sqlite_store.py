"""SQLite implementation of the store: the embedded default, shared by API and worker processes.

WAL journal, a busy timeout and ``BEGIN IMMEDIATE`` write transactions make it safe across
processes; ``synchronous=FULL`` keeps every accepted (202) check across a crash or restart.
Status changes are compare-and-set: ``UPDATE … WHERE id=? AND status=?``.
One connection per thread and per process (a connection is never carried across ``fork``).
"""

from __future__ import annotations

import json
import os
import sqlite3
import threading
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import Any

from service.store.base import (
    DEFAULT_RETENTION_S,
    RELEASED_LEASE_AGE_S,
    BatchRecord,
    CheckRecord,
    CheckSource,
    IdempotencyState,
    QuotaExceededError,
    TokenRecord,
    VerdictSummary,
    canonical_json,
    content_hash,
    merge_request,
    summarize_verdict,
)
from service.store.ids import new_batch_id, new_check_id
from service.store.jsontext import loads_json
from service.store.payload import load_request

_SCHEMA = """
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
    request TEXT NOT NULL,
    shared_hash TEXT,
    verdict TEXT,
    verdict_name TEXT,
    unstable_count INTEGER,
    first_frequency_hz REAL,
    first_node TEXT,
    error TEXT
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
    shared_hash TEXT
);
CREATE INDEX IF NOT EXISTS batches_tenant_created ON batches (tenant, created_at);
CREATE TABLE IF NOT EXISTS blobs (
    hash TEXT PRIMARY KEY,
    body TEXT NOT NULL,
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
CREATE TABLE IF NOT EXISTS rates (
    tenant TEXT NOT NULL,
    bucket INTEGER NOT NULL,
    hits INTEGER NOT NULL,
    PRIMARY KEY (tenant, bucket)
);
"""

_RECORD_COLUMNS = (
    "id, tenant, status, created_at, updated_at, attempts, batch_id, label, started_at, "
    "finished_at, lease_expires_at, error, verdict_name, unstable_count, first_frequency_hz, "
    "first_node"
)


def _record(row: sqlite3.Row, verdict_text: str | None = None) -> CheckRecord:
    summary = None
    if row["status"] == "done":
        summary = VerdictSummary(
            verdict=row["verdict_name"],
            unstable_count=row["unstable_count"],
            first_frequency_hz=row["first_frequency_hz"],
            first_node=row["first_node"],
        )
    return CheckRecord(
        id=row["id"], tenant=row["tenant"], status=row["status"],
        created_at=row["created_at"], updated_at=row["updated_at"], attempts=row["attempts"],
        batch_id=row["batch_id"], label=row["label"], started_at=row["started_at"],
        finished_at=row["finished_at"], lease_expires_at=row["lease_expires_at"],
        verdict=json.loads(verdict_text) if verdict_text is not None else None,
        error=row["error"], summary=summary,
    )


class SqliteStore:
    """The store in one SQLite file (``path``); safe for several processes and threads."""

    def __init__(
        self, path: str | os.PathLike[str], *, retention_s: float = DEFAULT_RETENTION_S,
        busy_timeout_s: float = 30.0, clock: Callable[[], float] = time.time,
    ) -> None:
        self.path = os.fspath(path)
        self.retention_s = float(retention_s)
        self.busy_timeout_s = busy_timeout_s
        self.clock = clock
        self._local = threading.local()
        parent = os.path.dirname(os.path.abspath(self.path))
        os.makedirs(parent, exist_ok=True)
        self._conn().executescript(_SCHEMA)

    # -- connections ------------------------------------------------------------------------------
    def _conn(self) -> sqlite3.Connection:
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
    def _write(self) -> Iterator[sqlite3.Connection]:
        """One write transaction, taken up front (``BEGIN IMMEDIATE``) so it cannot deadlock."""
        conn = self._conn()
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
            self._conn().execute("SELECT 1").fetchone()
        except sqlite3.Error:
            return False
        return True

    # -- accepting work ---------------------------------------------------------------------------
    def create_checks(
        self, tenant: str, checks: CheckSource, *, batch_label: str | None = None,
        as_batch: bool = False, shared: dict[str, Any] | None = None,
        max_unfinished: int | None = None,
        on_stored: Callable[[list[str]], None] | None = None,
    ) -> tuple[str | None, list[str]]:
        now = self.clock()
        batch_id = new_batch_id() if as_batch else None
        shared_hash = content_hash(shared) if shared is not None else None
        ids = [new_check_id() for _ in range(len(checks))]
        rows = [  # iterating ``checks`` may validate each one, and raise: nothing is written
            (cid, tenant, now, now, now, batch_id, seq, c.label, c.stored_text(), shared_hash)
            for seq, (cid, c) in enumerate(zip(ids, checks, strict=True))
        ]
        with self._write() as db:
            if max_unfinished is not None:
                unfinished = self._count_unfinished(db, tenant)
                if unfinished + len(checks) > max_unfinished:
                    raise QuotaExceededError(max_unfinished, unfinished, len(checks))
            if shared is not None:
                db.execute(
                    "INSERT OR IGNORE INTO blobs (hash, body, created_at) VALUES (?, ?, ?)",
                    (shared_hash, canonical_json(shared), now),
                )
            if batch_id is not None:
                db.execute(
                    "INSERT INTO batches (id, tenant, created_at, label, size, shared_hash) "
                    "VALUES (?, ?, ?, ?, ?, ?)",
                    (batch_id, tenant, now, batch_label, len(checks), shared_hash),
                )
            db.executemany(
                "INSERT INTO checks (id, tenant, status, created_at, updated_at, queued_at, "
                "batch_id, seq, label, request, shared_hash) "
                "VALUES (?, ?, 'queued', ?, ?, ?, ?, ?, ?, ?, ?)",
                rows,
            )
        if on_stored is not None:  # one transaction: handed over once, after the commit
            on_stored(ids)
        return batch_id, ids

    # -- reading ----------------------------------------------------------------------------------
    def get_check(self, tenant: str, check_id: str) -> CheckRecord | None:
        record = self.get_check_any(check_id)
        return record if record is not None and record.tenant == tenant else None

    def get_check_any(self, check_id: str) -> CheckRecord | None:
        row = self._conn().execute(
            f"SELECT {_RECORD_COLUMNS}, verdict FROM checks WHERE id = ?", (check_id,)
        ).fetchone()
        return _record(row, row["verdict"]) if row is not None else None

    def get_request(self, check_id: str) -> dict[str, Any] | None:
        row = self._conn().execute(
            "SELECT c.request, b.body FROM checks c LEFT JOIN blobs b ON b.hash = c.shared_hash "
            "WHERE c.id = ?",
            (check_id,),
        ).fetchone()
        if row is None:
            return None
        shared = loads_json(row["body"]) if row["body"] is not None else None
        return merge_request(shared, load_request(row["request"]))  # TEXT, or BLOB when binary

    def _counts(
        self, db: sqlite3.Connection, batch_id: str,
    ) -> tuple[dict[str, int], dict[str, int]]:
        by_status = {
            r[0]: r[1] for r in db.execute(
                "SELECT status, COUNT(*) FROM checks WHERE batch_id = ? GROUP BY status",
                (batch_id,),
            )
        }
        by_verdict = {
            r[0]: r[1] for r in db.execute(
                "SELECT verdict_name, COUNT(*) FROM checks WHERE batch_id = ? AND status = 'done' "
                "AND verdict_name IS NOT NULL GROUP BY verdict_name",
                (batch_id,),
            )
        }
        return by_status, by_verdict

    def get_batch(self, tenant: str, batch_id: str) -> BatchRecord | None:
        db = self._conn()
        row = db.execute(
            "SELECT id, tenant, created_at, label FROM batches WHERE id = ? AND tenant = ?",
            (batch_id, tenant),
        ).fetchone()
        if row is None:
            return None
        ids = tuple(r[0] for r in db.execute(
            "SELECT id FROM checks WHERE batch_id = ? ORDER BY seq", (batch_id,)
        ))
        by_status, by_verdict = self._counts(db, batch_id)
        return BatchRecord(
            id=row["id"], tenant=row["tenant"], created_at=row["created_at"], check_ids=ids,
            label=row["label"], counts_by_status=by_status, counts_by_verdict=by_verdict,
        )

    def list_batches(self, tenant: str, limit: int = 50) -> list[BatchRecord]:
        db = self._conn()
        rows = db.execute(
            "SELECT id, tenant, created_at, label FROM batches WHERE tenant = ? "
            "ORDER BY created_at DESC, rowid DESC LIMIT ?",
            (tenant, int(limit)),
        ).fetchall()
        out = []
        for row in rows:
            by_status, by_verdict = self._counts(db, row["id"])
            out.append(BatchRecord(
                id=row["id"], tenant=row["tenant"], created_at=row["created_at"],
                label=row["label"], counts_by_status=by_status, counts_by_verdict=by_verdict,
            ))
        return out

    def list_batch_checks(
        self, tenant: str, batch_id: str, *, after: str | None, limit: int,
        status: str | None = None, verdict: str | None = None,
    ) -> tuple[list[CheckRecord], str | None]:
        start = int(after) if after is not None else -1
        sql = (f"SELECT {_RECORD_COLUMNS}, seq FROM checks "
               "WHERE batch_id = ? AND tenant = ? AND seq > ?")
        params: list[Any] = [batch_id, tenant, start]
        if status is not None:
            sql += " AND status = ?"
            params.append(status)
        if verdict is not None:
            sql += " AND status = 'done' AND verdict_name = ?"
            params.append(verdict)
        sql += " ORDER BY seq LIMIT ?"
        params.append(int(limit) + 1)
        rows = self._conn().execute(sql, params).fetchall()
        page = rows[:limit]
        cursor = str(page[-1]["seq"]) if len(rows) > limit and page else None
        return [_record(r) for r in page], cursor

    # -- state changes ----------------------------------------------------------------------------
    def claim(self, check_id: str, lease_s: float, max_attempts: int) -> CheckRecord | None:
        now = self.clock()
        with self._write() as db:
            row = db.execute(
                "SELECT status, attempts, lease_expires_at FROM checks WHERE id = ?", (check_id,)
            ).fetchone()
            if row is None:
                return None
            status, attempts, lease = row["status"], row["attempts"], row["lease_expires_at"]
            expired = status == "running" and (lease is None or lease < now)
            if status != "queued" and not expired:
                return None
            if attempts >= max_attempts:
                db.execute(
                    "UPDATE checks SET status = 'failed', error = ?, finished_at = ?, "
                    "updated_at = ?, lease_expires_at = NULL WHERE id = ? AND status = ?",
                    (f"gave up after {attempts} attempts: every attempt ended its worker or "
                     "outlived its lease", now, now, check_id, status),
                )
                return None
            cur = db.execute(
                "UPDATE checks SET status = 'running', attempts = attempts + 1, started_at = ?, "
                "updated_at = ?, lease_expires_at = ? "
                "WHERE id = ? AND status = ? AND attempts = ?",
                (now, now, now + lease_s, check_id, status, attempts),
            )
            if cur.rowcount != 1:
                return None
        return self.get_check_any(check_id)

    def complete(self, check_id: str, verdict: dict[str, Any]) -> bool:
        now = self.clock()
        summary = summarize_verdict(verdict)
        assert summary is not None
        with self._write() as db:
            cur = db.execute(
                "UPDATE checks SET status = 'done', verdict = ?, verdict_name = ?, "
                "unstable_count = ?, first_frequency_hz = ?, first_node = ?, finished_at = ?, "
                "updated_at = ?, lease_expires_at = NULL WHERE id = ? AND status = 'running'",
                (json.dumps(verdict), summary.verdict, summary.unstable_count,
                 summary.first_frequency_hz, summary.first_node, now, now, check_id),
            )
            return cur.rowcount == 1

    def fail(self, check_id: str, reason: str) -> bool:
        now = self.clock()
        with self._write() as db:
            cur = db.execute(
                "UPDATE checks SET status = 'failed', error = ?, finished_at = ?, updated_at = ?, "
                "lease_expires_at = NULL WHERE id = ? AND status IN ('queued', 'running')",
                (reason, now, now, check_id),
            )
            return cur.rowcount == 1

    def release(self, check_id: str) -> bool:
        now = self.clock()
        with self._write() as db:
            cur = db.execute(
                "UPDATE checks SET lease_expires_at = ?, updated_at = ? "
                "WHERE id = ? AND status = 'running'",
                (now - RELEASED_LEASE_AGE_S, now, check_id),
            )
            return cur.rowcount == 1

    def cancel_check(self, tenant: str, check_id: str) -> CheckRecord | None:
        now = self.clock()
        with self._write() as db:
            db.execute(
                "UPDATE checks SET status = 'cancelled', finished_at = ?, updated_at = ?, "
                "lease_expires_at = NULL "
                "WHERE id = ? AND tenant = ? AND status IN ('queued', 'running')",
                (now, now, check_id, tenant),
            )
        return self.get_check(tenant, check_id)

    def cancel_batch(self, tenant: str, batch_id: str) -> BatchRecord | None:
        now = self.clock()
        with self._write() as db:
            db.execute(
                "UPDATE checks SET status = 'cancelled', finished_at = ?, updated_at = ?, "
                "lease_expires_at = NULL "
                "WHERE batch_id = ? AND tenant = ? AND status IN ('queued', 'running')",
                (now, now, batch_id, tenant),
            )
        return self.get_batch(tenant, batch_id)

    def expired_leases(self, now: float) -> list[str]:
        return [r[0] for r in self._conn().execute(
            "SELECT id FROM checks WHERE status = 'running' AND lease_expires_at < ?", (now,)
        )]

    def queued_ids(self, older_than: float) -> list[str]:
        return [r[0] for r in self._conn().execute(
            "SELECT id FROM checks WHERE status = 'queued' AND queued_at < ? ORDER BY queued_at",
            (older_than,),
        )]

    def touch_queued(self, check_ids: list[str], now: float) -> None:
        with self._write() as db:
            db.executemany(
                "UPDATE checks SET queued_at = ? WHERE id = ? AND status = 'queued'",
                [(now, cid) for cid in check_ids],
            )

    def purge(self, now: float) -> int:
        cutoff = now - self.retention_s
        with self._write() as db:
            gone = db.execute("DELETE FROM checks WHERE updated_at < ?", (cutoff,)).rowcount
            db.execute(
                "DELETE FROM batches WHERE created_at < ? AND NOT EXISTS "
                "(SELECT 1 FROM checks WHERE checks.batch_id = batches.id)",
                (cutoff,),
            )
            db.execute(
                "DELETE FROM blobs WHERE NOT EXISTS (SELECT 1 FROM checks WHERE "
                "checks.shared_hash = blobs.hash) AND NOT EXISTS (SELECT 1 FROM batches WHERE "
                "batches.shared_hash = blobs.hash)"
            )
            db.execute("DELETE FROM idempotency WHERE expires_at < ?", (now,))
        return gone

    # -- idempotency ------------------------------------------------------------------------------
    def idempotency_begin(
        self, tenant: str, key: str, body_hash: str, pending_ttl_s: float,
    ) -> tuple[IdempotencyState, str | None]:
        now = self.clock()
        with self._write() as db:
            row = db.execute(
                "SELECT body_hash, check_id, expires_at FROM idempotency "
                "WHERE tenant = ? AND key = ?",
                (tenant, key),
            ).fetchone()
            if row is not None and row["expires_at"] < now:
                db.execute("DELETE FROM idempotency WHERE tenant = ? AND key = ?", (tenant, key))
                row = None
            if row is None:
                db.execute(
                    "INSERT INTO idempotency (tenant, key, body_hash, check_id, expires_at) "
                    "VALUES (?, ?, ?, NULL, ?)",
                    (tenant, key, body_hash, now + pending_ttl_s),
                )
                return "new", None
            if row["body_hash"] != body_hash:
                return "mismatch", None
            if row["check_id"] is None:
                return "pending", None
            return "done", row["check_id"]

    def idempotency_finish(self, tenant: str, key: str, check_id: str) -> None:
        with self._write() as db:
            db.execute(
                "UPDATE idempotency SET check_id = ?, expires_at = ? WHERE tenant = ? AND key = ?",
                (check_id, self.clock() + self.retention_s, tenant, key),
            )

    def idempotency_release(self, tenant: str, key: str) -> None:
        with self._write() as db:
            db.execute(
                "DELETE FROM idempotency WHERE tenant = ? AND key = ? AND check_id IS NULL",
                (tenant, key),
            )

    # -- tenants, tokens, limits ------------------------------------------------------------------
    def put_token(self, token_hash: str, tenant: str) -> None:
        with self._write() as db:
            db.execute(
                "INSERT OR REPLACE INTO tokens (hash, tenant, created_at) VALUES (?, ?, ?)",
                (token_hash, tenant, self.clock()),
            )

    def get_token(self, token_hash: str) -> TokenRecord | None:
        row = self._conn().execute(
            "SELECT hash, tenant, created_at FROM tokens WHERE hash = ?", (token_hash,)
        ).fetchone()
        return TokenRecord(row[0], row[1], row[2]) if row is not None else None

    def tenant_for_token(self, token_hash: str) -> str | None:
        record = self.get_token(token_hash)
        return record.tenant if record is not None else None

    def list_tokens(self) -> list[TokenRecord]:
        return [TokenRecord(r[0], r[1], r[2]) for r in self._conn().execute(
            "SELECT hash, tenant, created_at FROM tokens ORDER BY created_at"
        )]

    def revoke_token(self, token_hash: str) -> bool:
        with self._write() as db:
            return db.execute("DELETE FROM tokens WHERE hash = ?", (token_hash,)).rowcount == 1

    @staticmethod
    def _count_unfinished(db: sqlite3.Connection, tenant: str) -> int:
        return int(db.execute(
            "SELECT COUNT(*) FROM checks WHERE tenant = ? AND status IN ('queued', 'running')",
            (tenant,),
        ).fetchone()[0])

    def count_unfinished(self, tenant: str) -> int:
        return self._count_unfinished(self._conn(), tenant)

    def hit_rate(self, tenant: str, window_s: float, limit: int) -> float:
        now = self.clock()
        bucket = int(now // window_s)
        with self._write() as db:
            db.execute(
                "INSERT INTO rates (tenant, bucket, hits) VALUES (?, ?, 1) "
                "ON CONFLICT (tenant, bucket) DO UPDATE SET hits = hits + 1",
                (tenant, bucket),
            )
            hits = db.execute(
                "SELECT hits FROM rates WHERE tenant = ? AND bucket = ?", (tenant, bucket)
            ).fetchone()[0]
            db.execute("DELETE FROM rates WHERE tenant = ? AND bucket < ?", (tenant, bucket))
        if hits <= limit:
            return 0.0
        return max((bucket + 1) * window_s - now, 0.001)
