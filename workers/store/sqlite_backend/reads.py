"""Reading checks and batches from the SQLite store."""

from __future__ import annotations

import json
import sqlite3
from typing import Any

from workers.store.records import (
    UNKNOWN_ENCODING,
    BatchRecord,
    CheckRecord,
    StoredRequest,
    VerdictSummary,
)
from workers.store.sqlite_backend.database import SqliteBase

RECORD_COLUMNS = (
    "id, tenant, status, created_at, updated_at, attempts, batch_id, label, started_at, "
    "finished_at, lease_expires_at, error, verdict_name, unstable_count, first_frequency_hz, "
    "first_node, extends, priority, request_id, worker"
)


def record_from_row(row: sqlite3.Row, verdict_text: str | None = None) -> CheckRecord:
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
        error=row["error"], summary=summary, extends=row["extends"],
        priority="urgent" if row["priority"] == "urgent" else "normal",
        request_id=row["request_id"], worker=row["worker"],
    )


BATCH_COLUMNS = "id, tenant, created_at, label, priority, callback_url, callback_status"


class SqliteCheckReads(SqliteBase):
    """Records, stored requests, batches and their pages."""

    def get_check(self, tenant: str, check_id: str) -> CheckRecord | None:
        record = self.get_check_any(check_id)
        return record if record is not None and record.tenant == tenant else None

    def get_check_any(self, check_id: str) -> CheckRecord | None:
        row = self._conn().execute(
            f"SELECT {RECORD_COLUMNS}, verdict FROM checks WHERE id = ?", (check_id,)
        ).fetchone()
        return record_from_row(row, row["verdict"]) if row is not None else None

    def get_request(self, check_id: str) -> StoredRequest | None:
        db = self._conn()
        row = db.execute(
            "SELECT request, encoding, shared FROM checks WHERE id = ?", (check_id,)
        ).fetchone()
        if row is None:
            return None
        digests = (row["shared"] or "").split()
        shared = {r[0]: r[1] for r in db.execute(
            f"SELECT hash, body FROM blobs WHERE hash IN ({', '.join('?' * len(digests))})",
            digests)} if digests else {}
        if len(shared) != len(set(digests)):
            return None
        payload = row["request"]  # a BLOB; TEXT in files written by an earlier version
        return StoredRequest(payload if isinstance(payload, bytes) else payload.encode(),
                             row["encoding"] or UNKNOWN_ENCODING, shared)

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
            f"SELECT {BATCH_COLUMNS} FROM batches WHERE id = ? AND tenant = ?",
            (batch_id, tenant),
        ).fetchone()
        if row is None:
            return None
        ids = tuple(r[0] for r in db.execute(
            "SELECT id FROM checks WHERE batch_id = ? ORDER BY seq", (batch_id,)
        ))
        return self._batch_record(db, row, ids)

    def _batch_record(self, db: sqlite3.Connection, row: sqlite3.Row,
                      ids: tuple[str, ...] = ()) -> BatchRecord:
        by_status, by_verdict = self._counts(db, row["id"])
        return BatchRecord(
            id=row["id"], tenant=row["tenant"], created_at=row["created_at"], check_ids=ids,
            label=row["label"], counts_by_status=by_status, counts_by_verdict=by_verdict,
            priority="urgent" if row["priority"] == "urgent" else "normal",
            callback_url=row["callback_url"], callback_status=row["callback_status"],
        )

    def list_batches(self, tenant: str, limit: int = 50) -> list[BatchRecord]:
        db = self._conn()
        rows = db.execute(
            f"SELECT {BATCH_COLUMNS} FROM batches WHERE tenant = ? "
            "ORDER BY created_at DESC, rowid DESC LIMIT ?",
            (tenant, int(limit)),
        ).fetchall()
        return [self._batch_record(db, row) for row in rows]

    def list_batch_checks(
        self, tenant: str, batch_id: str, *, after: str | None, limit: int,
        status: str | None = None, verdict: str | None = None,
    ) -> tuple[list[CheckRecord], str | None]:
        start = int(after) if after is not None else -1
        sql = (f"SELECT {RECORD_COLUMNS}, seq FROM checks "
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
        return [record_from_row(r) for r in page], cursor

    @staticmethod
    def _count_unfinished(db: sqlite3.Connection, tenant: str, urgent: bool = False) -> int:
        return int(db.execute(
            "SELECT COUNT(*) FROM checks WHERE tenant = ? AND status IN ('queued', 'running')"
            + (" AND priority = 'urgent'" if urgent else ""),
            (tenant,),
        ).fetchone()[0])

    def count_unfinished(self, tenant: str) -> int:
        return self._count_unfinished(self._conn(), tenant)
