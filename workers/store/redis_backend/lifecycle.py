"""Status changes of checks on Redis (Lua compare-and-set), the reconciler's indexes, retention."""

from __future__ import annotations

import json
from typing import Any

from workers.store.records import (
    RELEASED_LEASE_AGE_S,
    BatchRecord,
    CheckRecord,
    summarize_verdict,
)
from workers.store.redis_backend import scripts
from workers.store.redis_backend.connection import timestamp as _t
from workers.store.redis_backend.reads import RedisCheckReads


class RedisCheckLifecycle(RedisCheckReads):
    """Claims and leases, completion, failure, cancellation; expired leases, undelivered checks
    and the purge of index entries whose record has expired."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self._claim = self.r.register_script(scripts.LUA_CLAIM)
        self._complete = self.r.register_script(scripts.LUA_COMPLETE)
        self._finish = self.r.register_script(scripts.LUA_FINISH)
        self._release = self.r.register_script(scripts.LUA_RELEASE)
        self._cancel_batch = self.r.register_script(scripts.LUA_CANCEL_BATCH)

    def claim(self, check_id: str, lease_s: float, max_attempts: int) -> CheckRecord | None:
        now = self.clock()
        outcome = self._claim(args=[
            self.p, check_id, _t(now), _t(now + lease_s), int(max_attempts), self._ttl,
            "gave up after %d attempts: every attempt ended its worker or outlived its lease",
        ])
        # a check just claimed is running: it has no verdict to read
        return self._records([check_id], with_verdict=False)[0] if int(outcome) == 1 else None

    def complete(self, check_id: str, verdict: dict[str, Any]) -> bool:
        summary = summarize_verdict(verdict)
        assert summary is not None
        done = self._complete(args=[
            self.p, check_id, _t(self.clock()), self._ttl, json.dumps(verdict),
            summary.verdict or "",
            "" if summary.unstable_count is None else summary.unstable_count,
            "" if summary.first_frequency_hz is None else repr(summary.first_frequency_hz),
            summary.first_node or "",
        ])
        return int(done) == 1

    def fail(self, check_id: str, reason: str) -> bool:
        done = self._finish(args=[
            self.p, check_id, _t(self.clock()), self._ttl, reason, "", "failed",
        ])
        return int(done) == 1

    def release(self, check_id: str) -> bool:
        ended = self.clock() - RELEASED_LEASE_AGE_S
        return int(self._release(args=[self.p, check_id, _t(ended)])) == 1

    def cancel_check(self, tenant: str, check_id: str) -> CheckRecord | None:
        self._finish(args=[
            self.p, check_id, _t(self.clock()), self._ttl, "", tenant, "cancelled",
        ])
        return self.get_check(tenant, check_id)

    def cancel_batch(self, tenant: str, batch_id: str) -> BatchRecord | None:
        if self.r.hget(f"{self.p}batch:{batch_id}", "tenant") != tenant:
            return None
        self._cancel_batch(
            keys=[f"{self.p}batch:{batch_id}:ids"],
            args=[self.p, _t(self.clock()), self._ttl, tenant],
        )
        return self.get_batch(tenant, batch_id)

    def expired_leases(self, now: float) -> list[str]:
        return list(self.r.zrangebyscore(f"{self.p}leases", "-inf", f"({_t(now)}"))

    def queued_ids(self, older_than: float) -> list[str]:
        return list(self.r.zrangebyscore(f"{self.p}queued", "-inf", f"({_t(older_than)}"))

    def touch_queued(self, check_ids: list[str], now: float) -> None:
        if check_ids:
            self.r.zadd(f"{self.p}queued", dict.fromkeys(check_ids, now), xx=True)

    def purge(self, now: float) -> int:
        """Redis expires records by TTL; purge only drops index entries whose record is gone
        (from the reconciler's zsets and the tenants' unfinished sets). Returns how many."""
        gone = 0
        indexes = [f"{self.p}queued", f"{self.p}leases"]
        for index in indexes:
            ids = self.r.zrangebyscore(index, "-inf", _t(now - self.retention_s))
            for cid in ids:
                if not self.r.exists(f"{self.p}check:{cid}"):
                    gone += self.r.zrem(index, cid)
        for open_key in self.r.scan_iter(match=f"{self.p}t:*:open", count=1000):
            members = list(self.r.sscan_iter(open_key, count=1000))
            pipe = self.r.pipeline(transaction=False)
            for cid in members:
                pipe.exists(f"{self.p}check:{cid}")
            for cid, present in zip(members, pipe.execute(), strict=True):
                if not present:
                    gone += self.r.srem(open_key, cid)
        return gone
