"""The SQLite check store: accepting checks (validated while they are read, written in one
transaction) on top of the reads and status changes of ``reads`` and ``lifecycle``."""

from __future__ import annotations

from collections.abc import Callable, Mapping

from workers.store.ids import new_batch_id, new_check_id
from workers.store.records import (
    CheckSource,
    QuotaExceededError,
    Submission,
    UrgentQuotaExceededError,
)
from workers.store.sqlite_backend.lifecycle import SqliteCheckLifecycle


class SqliteCheckStore(SqliteCheckLifecycle):
    """``workers.store.protocols.CheckStore`` in a SQLite file."""

    def create_checks(
        self, tenant: str, checks: CheckSource, *, batch_label: str | None = None,
        as_batch: bool = False, shared: Mapping[str, bytes] | None = None,
        max_unfinished: int | None = None,
        on_stored: Callable[[list[str]], None] | None = None,
        submission: Submission | None = None, max_urgent: int | None = None,
    ) -> tuple[str | None, list[str]]:
        now = self.clock()
        submission = submission or Submission()
        batch_id = new_batch_id() if as_batch else None
        ids = [new_check_id() for _ in range(len(checks))]
        made = list(zip(ids, checks, strict=True))  # may validate each one, and raise
        blobs = dict(shared or {})  # complete once the source is read
        digests = " ".join(blobs) or None
        rows = [(cid, tenant, now, now, now, batch_id, seq, c.label, c.payload, c.encoding,
                 digests, submission.priority, submission.request_id, c.extends)
                for seq, (cid, c) in enumerate(made)]
        with self._write() as db:
            if max_unfinished is not None:
                unfinished = self._count_unfinished(db, tenant)
                if unfinished + len(checks) > max_unfinished:
                    raise QuotaExceededError(max_unfinished, unfinished, len(checks))
            if submission.priority == "urgent" and max_urgent is not None:
                urgent = self._count_unfinished(db, tenant, urgent=True)
                if urgent + len(checks) > max_urgent:
                    raise UrgentQuotaExceededError(max_urgent, urgent, len(checks))
            db.execute("INSERT OR IGNORE INTO tenants (tenant) VALUES (?)", (tenant,))
            db.executemany(
                "INSERT OR IGNORE INTO blobs (hash, body, created_at) VALUES (?, ?, ?)",
                [(digest, body, now) for digest, body in blobs.items()],
            )
            if batch_id is not None:
                url = submission.callback_url
                db.execute(
                    "INSERT INTO batches (id, tenant, created_at, label, size, priority, "
                    "callback_url, callback_status, callback_next_at) "
                    "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                    (batch_id, tenant, now, batch_label, len(checks), submission.priority, url,
                     "waiting" if url else None, now if url else None),
                )
            db.executemany(
                "INSERT INTO checks (id, tenant, status, created_at, updated_at, queued_at, "
                "batch_id, seq, label, request, encoding, shared, priority, request_id, "
                "extends) "
                "VALUES (?, ?, 'queued', ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                rows,
            )
        if on_stored is not None:  # one transaction: handed over once, after the commit
            on_stored(ids)
        return batch_id, ids
