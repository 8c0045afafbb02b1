"""The Redis access store: tokens, per-tenant request rates and idempotency keys.

Keys (under the prefix): ``token:{sha256}`` (hash) and ``tokens`` (set), ``t:{tenant}:rate:
{window}`` (counter), ``t:{tenant}:idem:{sha256 of the key}`` (hash); rate and idempotency keys
expire by TTL.
"""

from __future__ import annotations

import hashlib
import json
from typing import Any

from workers.store.records import IdempotencyState, TokenRecord
from workers.store.redis_backend import scripts
from workers.store.redis_backend.connection import RedisBase
from workers.store.redis_backend.connection import timestamp as _t


def _key_digest(key: str) -> str:
    """SHA-256 of the key as a JSON string (the key names no Redis key itself)."""
    return hashlib.sha256(json.dumps(key).encode()).hexdigest()


class RedisAccessStore(RedisBase):
    """``workers.store.protocols.AccessStore`` on a Redis server."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self._idem_begin = self.r.register_script(scripts.LUA_IDEM_BEGIN)
        self._idem_release = self.r.register_script(scripts.LUA_IDEM_RELEASE)
        self._count = self.r.register_script(scripts.LUA_COUNT)

    # -- idempotency ------------------------------------------------------------------------------
    def _idem_key(self, tenant: str, key: str) -> str:
        return f"{self.p}t:{tenant}:idem:{_key_digest(key)}"

    def idempotency_begin(
        self, tenant: str, key: str, body_hash: str, pending_ttl_s: float,
    ) -> tuple[IdempotencyState, str | None]:
        state, check_id = self._idem_begin(
            keys=[self._idem_key(tenant, key)],
            args=[body_hash, max(int(pending_ttl_s * 1000), 1)],
        )
        return state, (check_id or None)

    def idempotency_finish(self, tenant: str, key: str, check_id: str) -> None:
        k = self._idem_key(tenant, key)
        pipe = self.r.pipeline(transaction=True)
        pipe.hset(k, "check_id", check_id)
        pipe.expire(k, self._ttl)
        pipe.execute()

    def idempotency_release(self, tenant: str, key: str) -> None:
        self._idem_release(keys=[self._idem_key(tenant, key)])

    def purge(self, now: float) -> int:
        """Idempotency keys and rate windows expire by TTL: nothing to do."""
        return 0

    # -- tokens and rates -------------------------------------------------------------------------
    def put_token(self, token_hash: str, tenant: str) -> None:
        pipe = self.r.pipeline(transaction=True)
        pipe.hset(f"{self.p}token:{token_hash}",
                  mapping={"tenant": tenant, "created_at": _t(self.clock())})
        pipe.sadd(f"{self.p}tokens", token_hash)
        pipe.execute()

    def get_token(self, token_hash: str) -> TokenRecord | None:
        head = self.r.hgetall(f"{self.p}token:{token_hash}")
        if not head:
            return None
        return TokenRecord(token_hash, head["tenant"], float(head["created_at"]))

    def tenant_for_token(self, token_hash: str) -> str | None:
        return self.r.hget(f"{self.p}token:{token_hash}", "tenant")

    def list_tokens(self) -> list[TokenRecord]:
        out = [self.get_token(h) for h in self.r.smembers(f"{self.p}tokens")]
        return sorted((t for t in out if t is not None), key=lambda t: t.created_at)

    def revoke_token(self, token_hash: str) -> bool:
        pipe = self.r.pipeline(transaction=True)
        pipe.delete(f"{self.p}token:{token_hash}")
        pipe.srem(f"{self.p}tokens", token_hash)
        deleted, _ = pipe.execute()
        return int(deleted) == 1

    def count_checks(self, tenant: str, window_s: float, limit: int, amount: int) -> float:
        now = self.clock()
        bucket = int(now // window_s)
        counted = self._count(keys=[f"{self.p}t:{tenant}:checks:{bucket}"],
                              args=[int(amount), int(limit), max(int(window_s * 2), 1)])
        if int(counted):
            return 0.0
        return max((bucket + 1) * window_s - now, 0.001)

    def webhook_secrets(self, tenant: str, now: float) -> tuple[str, ...]:
        head = self.r.hgetall(f"{self.p}t:{tenant}:webhook")
        if not head.get("current"):
            return ()
        if head.get("previous") and float(head.get("previous_until") or 0) > now:
            return head["current"], head["previous"]
        return (head["current"],)

    def put_webhook_secret(self, tenant: str, secret: str, now: float, grace_s: float) -> None:
        key = f"{self.p}t:{tenant}:webhook"
        pipe = self.r.pipeline(transaction=True)
        pipe.watch(key)
        old = pipe.hget(key, "current")
        pipe.multi()
        pipe.hset(key, mapping={"current": secret, "previous": old or "",
                                "previous_until": _t(now + grace_s)})
        pipe.execute()

    def hit_rate(self, tenant: str, window_s: float, limit: int) -> float:
        now = self.clock()
        bucket = int(now // window_s)
        key = f"{self.p}t:{tenant}:rate:{bucket}"
        pipe = self.r.pipeline(transaction=True)
        pipe.incr(key)
        pipe.expire(key, max(int(window_s * 2), 1))
        hits, _ = pipe.execute()
        if int(hits) <= limit:
            return 0.0
        return max((bucket + 1) * window_s - now, 0.001)
