"""The SQLite access store: tokens, per-tenant request rates and idempotency keys."""

from __future__ import annotations

from workers.store.records import IdempotencyState, TokenRecord
from workers.store.sqlite_backend.database import SqliteBase


class SqliteAccessStore(SqliteBase):
    """``workers.store.protocols.AccessStore`` in a SQLite file."""

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

    def purge(self, now: float) -> int:
        with self._write() as db:
            return db.execute("DELETE FROM idempotency WHERE expires_at < ?", (now,)).rowcount

    # -- tokens and rates -------------------------------------------------------------------------
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

    def count_checks(self, tenant: str, window_s: float, limit: int, amount: int) -> float:
        """Counted in ``rates`` under ``checks:<tenant>`` (a tenant name has no colon)."""
        now = self.clock()
        bucket = int(now // window_s)
        key = f"checks:{tenant}"
        with self._write() as db:
            row = db.execute("SELECT hits FROM rates WHERE tenant = ? AND bucket = ?",
                             (key, bucket)).fetchone()
            hits = int(row[0]) if row is not None else 0
            if amount > 0 and hits + amount > limit:
                return max((bucket + 1) * window_s - now, 0.001)
            db.execute(
                "INSERT INTO rates (tenant, bucket, hits) VALUES (?, ?, ?) "
                "ON CONFLICT (tenant, bucket) DO UPDATE SET hits = hits + excluded.hits",
                (key, bucket, int(amount)))
            db.execute("DELETE FROM rates WHERE tenant = ? AND bucket < ?", (key, bucket))
        return 0.0

    def webhook_secrets(self, tenant: str, now: float) -> tuple[str, ...]:
        row = self._conn().execute(
            "SELECT current, previous, previous_until FROM webhook_secrets WHERE tenant = ?",
            (tenant,)).fetchone()
        if row is None:
            return ()
        if row[1] and (row[2] or 0) > now:
            return row[0], row[1]
        return (row[0],)

    def put_webhook_secret(self, tenant: str, secret: str, now: float, grace_s: float) -> None:
        with self._write() as db:
            db.execute(
                "INSERT INTO webhook_secrets (tenant, current, previous, previous_until) "
                "VALUES (?, ?, NULL, NULL) ON CONFLICT (tenant) DO UPDATE SET "
                "previous = current, previous_until = ?, current = excluded.current",
                (tenant, secret, now + grace_s))

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
