"""Status changes of checks on Redis (Lua compare-and-set), the reconciler's indexes, retention."""

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
        self._take_callback = self.r.register_script(scripts.LUA_TAKE_CALLBACK)

    def claim(self, check_id: str, lease_s: float, max_attempts: int,
              worker: str | None = None) -> CheckRecord | None:
        now = self.clock()
        outcome = self._claim(args=[
            self.p, check_id, _t(now), _t(now + lease_s), int(max_attempts), self._ttl,
            "gave up after %d attempts: every attempt ended its worker or outlived its lease",
            worker or "",
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

    # -- queues per tenant, running checks per worker ---------------------------------------------
    def routes(self, check_ids: list[str]) -> dict[str, Route]:
        pipe = self.r.pipeline(transaction=False)
        for cid in check_ids:
            pipe.hmget(f"{self.p}check:{cid}", ["tenant", "priority"])
        out = {}
        for cid, (tenant, priority) in zip(check_ids, pipe.execute(), strict=True):
            if tenant:
                out[cid] = Route(tenant, "urgent" if priority == "urgent" else "normal")
        return out

    def tenants(self) -> list[str]:
        return sorted(self.r.smembers(f"{self.p}tenants"))

    def running_workers(self) -> dict[str, str | None]:
        ids = self.r.zrange(f"{self.p}leases", 0, -1)
        pipe = self.r.pipeline(transaction=False)
        for cid in ids:
            pipe.hmget(f"{self.p}check:{cid}", ["status", "worker"])
        return {cid: worker or None for cid, (status, worker) in zip(ids, pipe.execute(),
                                                                     strict=True)
                if status == "running"}

    # -- batch callbacks --------------------------------------------------------------------------
    def due_callbacks(self, now: float, lease_s: float, limit: int = 20) -> list[DueCallback]:
        """Looks at the earliest due entries of ``callbacks``; a batch still running is looked at
        again a second later, a finished one is taken (held for ``lease_s``)."""
        key = f"{self.p}callbacks"
        out: list[DueCallback] = []
        for batch_id in self.r.zrangebyscore(key, "-inf", _t(now), start=0, num=10 * limit):
            bkey = f"{self.p}batch:{batch_id}"
            head = self.r.hgetall(bkey)
            if not head or head.get("callback_status") != "waiting":
                self.r.zrem(key, batch_id)
                continue
            by_status, _ = self._split_counts(self.r.hgetall(f"{bkey}:counts"))
            if by_status.get("queued", 0) or by_status.get("running", 0):
                self.r.zadd(key, {batch_id: now + 1.0}, xx=True)
                continue
            if int(self._take_callback(keys=[key], args=[batch_id, _t(now),
                                                         _t(now + lease_s)])):
                out.append(DueCallback(batch_id, head["tenant"], head["callback_url"],
                                       int(head.get("callback_attempts") or 0)))
            if len(out) >= limit:
                break
        return out

    def callback_result(self, batch_id: str, *, delivered: bool, attempts: int,
                        next_at: float | None, error: str | None = None) -> None:
        status = "delivered" if delivered else "waiting" if next_at is not None else "failed"
        pipe = self.r.pipeline(transaction=True)
        pipe.hset(f"{self.p}batch:{batch_id}", mapping={
            "callback_status": status, "callback_attempts": attempts,
            "callback_error": error or ""})
        if status == "waiting":
            pipe.zadd(f"{self.p}callbacks", {batch_id: next_at})
        else:
            pipe.zrem(f"{self.p}callbacks", batch_id)
        pipe.execute()
