"""Status changes of checks in SQLite (``UPDATE … WHERE id = ? AND status = ?``), the
reconciler's indexes and retention."""

from __future__ import annotations

import json
from typing import Any

from workers.store.records import (
    RELEASED_LEASE_AGE_S,
    BatchRecord,
    CheckRecord,
    DueCallback,
    Route,
    summarize_verdict,
)
from workers.store.sqlite_backend.reads import SqliteCheckReads


class SqliteCheckLifecycle(SqliteCheckReads):
    """Claims and leases, completion, failure, cancellation; expired leases, undelivered checks
    and the purge of what is older than the retention."""

    def claim(self, check_id: str, lease_s: float, max_attempts: int,
              worker: str | None = None) -> CheckRecord | None:
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
                "updated_at = ?, lease_expires_at = ?, worker = ? "
                "WHERE id = ? AND status = ? AND attempts = ?",
                (now, now, now + lease_s, worker, check_id, status, attempts),
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

    def _cancel(self, column: str, key: str, tenant: str) -> None:
        """The tenant's unfinished checks whose ``column`` (id or batch_id) is ``key`` →
        cancelled."""
        now = self.clock()
        with self._write() as db:
            db.execute(
                "UPDATE checks SET status = 'cancelled', finished_at = ?, updated_at = ?, "
                f"lease_expires_at = NULL WHERE {column} = ? AND tenant = ? "
                "AND status IN ('queued', 'running')",
                (now, now, key, tenant),
            )

    def cancel_check(self, tenant: str, check_id: str) -> CheckRecord | None:
        self._cancel("id", check_id, tenant)
        return self.get_check(tenant, check_id)

    def cancel_batch(self, tenant: str, batch_id: str) -> BatchRecord | None:
        self._cancel("batch_id", batch_id, tenant)
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
        """Checks (and then batches) last changed before the retention, and shared bytes that
        old that no check refers to any more."""
        cutoff = now - self.retention_s
        with self._write() as db:
            gone = db.execute("DELETE FROM checks WHERE updated_at < ?", (cutoff,)).rowcount
            db.execute(
                "DELETE FROM batches WHERE created_at < ? AND NOT EXISTS "
                "(SELECT 1 FROM checks WHERE checks.batch_id = batches.id)",
                (cutoff,),
            )
            db.execute(
                "DELETE FROM blobs WHERE created_at < ? AND NOT EXISTS (SELECT 1 FROM checks "
                "WHERE instr(checks.shared, blobs.hash) > 0)",
                (cutoff,),
            )
        return gone

    # -- queues per tenant, running checks per worker ---------------------------------------------
    def routes(self, check_ids: list[str]) -> dict[str, Route]:
        out: dict[str, Route] = {}
        db = self._conn()
        for start in range(0, len(check_ids), 500):
            part = check_ids[start:start + 500]
            for row in db.execute(
                    "SELECT id, tenant, priority FROM checks WHERE id IN "
                    f"({', '.join('?' * len(part))})", part):
                out[row[0]] = Route(row[1], "urgent" if row[2] == "urgent" else "normal")
        return out

    def tenants(self) -> list[str]:
        return [r[0] for r in self._conn().execute("SELECT tenant FROM tenants ORDER BY tenant")]

    def running_workers(self) -> dict[str, str | None]:
        return {r[0]: r[1] for r in self._conn().execute(
            "SELECT id, worker FROM checks WHERE status = 'running'")}

    # -- batch callbacks --------------------------------------------------------------------------
    def due_callbacks(self, now: float, lease_s: float, limit: int = 20) -> list[DueCallback]:
        out: list[DueCallback] = []
        with self._write() as db:
            rows = db.execute(
                "SELECT id, tenant, callback_url, callback_attempts FROM batches b "
                "WHERE callback_status = 'waiting' AND callback_next_at <= ? AND NOT EXISTS "
                "(SELECT 1 FROM checks c WHERE c.batch_id = b.id "
                "AND c.status IN ('queued', 'running')) ORDER BY callback_next_at LIMIT ?",
                (now, int(limit))).fetchall()
            for row in rows:
                db.execute("UPDATE batches SET callback_next_at = ? WHERE id = ?",
                           (now + lease_s, row[0]))
                out.append(DueCallback(row[0], row[1], row[2], int(row[3])))
        return out

    def callback_result(self, batch_id: str, *, delivered: bool, attempts: int,
                        next_at: float | None, error: str | None = None) -> None:
        status = "delivered" if delivered else "waiting" if next_at is not None else "failed"
        with self._write() as db:
            db.execute(
                "UPDATE batches SET callback_status = ?, callback_attempts = ?, "
                "callback_next_at = ?, callback_error = ? WHERE id = ?",
                (status, attempts, next_at, error, batch_id))
