"""The Redis check store: accepting checks (in chunks, queued as they are written) on top of the
reads and status changes of ``reads`` and ``lifecycle``."""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any

import redis

from workers.store.ids import new_batch_id, new_check_id
from workers.store.records import (
    CheckSource,
    NewCheck,
    QuotaExceededError,
    Submission,
    UrgentQuotaExceededError,
)
from workers.store.redis_backend import scripts
from workers.store.redis_backend.connection import timestamp as _t
from workers.store.redis_backend.lifecycle import RedisCheckLifecycle

STORE_CHUNK_BYTES = 4_000_000  # request bytes per MULTI/EXEC while storing many checks
STORE_CHUNK_CHECKS = 200


class RedisCheckStore(RedisCheckLifecycle):
    """``workers.store.protocols.CheckStore`` on a Redis server."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self._reserve = self.r.register_script(scripts.LUA_RESERVE)

    def create_checks(
        self, tenant: str, checks: CheckSource, *, batch_label: str | None = None,
        as_batch: bool = False, shared: Mapping[str, bytes] | None = None,
        max_unfinished: int | None = None,
        on_stored: Callable[[list[str]], None] | None = None,
        submission: Submission | None = None, max_urgent: int | None = None,
    ) -> tuple[str | None, list[str]]:
        """Reserve the tenant's quota (Lua), then write the checks in chunks of about
        ``STORE_CHUNK_BYTES`` (one MULTI/EXEC each, with the shared bytes not yet written) as
        ``checks`` yields them, calling ``on_stored`` after each chunk so that workers start
        while the rest is written; the batch record is written last. If anything fails,
        iterating ``checks`` included, the checks already written are deleted again
        (:meth:`_discard`)."""
        now = self.clock()
        submission = submission or Submission()
        batch_id = new_batch_id() if as_batch else None
        ids = [new_check_id() for _ in range(len(checks))]
        urgent = submission.priority == "urgent"
        urgent_limit = (-1 if not urgent else -2 if max_urgent is None else max_urgent)
        accepted, unfinished = self._reserve(
            keys=[f"{self.p}t:{tenant}:open", f"{self.p}t:{tenant}:urgent"],
            args=[-1 if max_unfinished is None else max_unfinished, urgent_limit, *ids])
        if int(accepted) == 0:
            raise QuotaExceededError(int(max_unfinished or 0), int(unfinished), len(checks))
        if int(accepted) == 2:
            raise UrgentQuotaExceededError(int(max_urgent or 0), int(unfinished), len(checks))
        stored = 0
        written: set[str] = set()
        try:
            pending: list[NewCheck] = []
            size = 0
            for n, check in enumerate(checks, start=1):  # a lazy source may validate here
                pending.append(check)
                size += len(check.payload)
                if (len(pending) >= STORE_CHUNK_CHECKS or size >= STORE_CHUNK_BYTES
                        or n == len(ids)):
                    first = stored
                    stored = self._store_chunk(tenant, ids, pending, first, now, batch_id,
                                               shared or {}, written, submission)
                    if on_stored is not None:
                        on_stored(ids[first:stored])
                    pending, size = [], 0
            if pending or stored != len(ids):
                raise ValueError(f"{stored + len(pending)} checks given where len() said "
                                 f"{len(ids)}")
            if batch_id is not None:
                self._store_batch(tenant, batch_id, batch_label, len(ids), now, submission)
        except BaseException:
            self._discard(tenant, ids, batch_id)
            raise
        return batch_id, ids

    def _store_chunk(self, tenant: str, ids: list[str], chunk: list[NewCheck], first: int,
                     now: float, batch_id: str | None, shared: Mapping[str, bytes],
                     written: set[str], submission: Submission) -> int:
        """``chunk`` as ``queued`` under ``ids[first:]`` (with its batch's id list and counts,
        and the shared bytes not in ``written`` yet); returns how many checks are stored now."""
        ttl = self._ttl
        stop = first + len(chunk)
        pipe = self.r.pipeline(transaction=True)
        digests = list(shared)
        for digest in digests:
            if digest not in written:
                pipe.set(f"{self.p}blob:{digest}", shared[digest], ex=ttl, nx=True)
                pipe.expire(f"{self.p}blob:{digest}", ttl)
        for seq, c in enumerate(chunk, start=first):
            ck = f"{self.p}check:{ids[seq]}"
            pipe.hset(ck, mapping={
                "tenant": tenant, "status": "queued", "created_at": _t(now),
                "updated_at": _t(now), "attempts": 0, "batch_id": batch_id or "",
                "seq": seq, "label": c.label if c.label is not None else "",
                "encoding": c.encoding, "shared": " ".join(digests),
                "extends": c.extends or "",
                "priority": submission.priority, "request_id": submission.request_id or "",
            })
            pipe.expire(ck, ttl)
            pipe.set(f"{self.p}req:{ids[seq]}", c.payload, ex=ttl)
        pipe.zadd(f"{self.p}queued", dict.fromkeys(ids[first:stop], now))
        pipe.sadd(f"{self.p}tenants", tenant)
        if batch_id is not None:
            bkey = f"{self.p}batch:{batch_id}"
            pipe.rpush(f"{bkey}:ids", *ids[first:stop])
            pipe.hincrby(f"{bkey}:counts", "s:queued", stop - first)
            for key in (f"{bkey}:ids", f"{bkey}:counts"):
                pipe.expire(key, ttl)
        pipe.execute()
        written.update(digests)
        return stop

    def _discard(self, tenant: str, ids: list[str], batch_id: str | None) -> None:
        """Undo a ``create_checks`` that did not finish: delete whatever was written of its
        checks (all ids: a chunk whose EXEC failed on the way may or may not be there; a message
        already queued for one then finds no check and does nothing, a worker already running one
        finds no check to complete) and give the whole reservation back. Shared bytes are left
        to expire: another batch with the same content may hold them too."""
        try:
            pipe = self.r.pipeline(transaction=True)
            for cid in ids:
                pipe.delete(f"{self.p}check:{cid}", f"{self.p}req:{cid}",
                            f"{self.p}verdict:{cid}")
            if ids:
                pipe.zrem(f"{self.p}queued", *ids)
                pipe.zrem(f"{self.p}leases", *ids)
                pipe.srem(f"{self.p}t:{tenant}:open", *ids)
                pipe.srem(f"{self.p}t:{tenant}:urgent", *ids)
            if batch_id is not None:
                bkey = f"{self.p}batch:{batch_id}"
                pipe.delete(bkey, f"{bkey}:ids", f"{bkey}:counts")
                pipe.zrem(f"{self.p}t:{tenant}:batches", batch_id)
            pipe.execute()
        except redis.RedisError:
            pass  # records left behind run as usual and expire; the purge drops reserved ids

    def _store_batch(self, tenant: str, batch_id: str, label: str | None, size: int,
                     now: float, submission: Submission) -> None:
        """The batch's own record and its place in the tenant's list: written last (with its
        callback, if any, in the ``callbacks`` zset that the senders watch)."""
        ttl = self._ttl
        bkey = f"{self.p}batch:{batch_id}"
        pipe = self.r.pipeline(transaction=True)
        pipe.hset(bkey, mapping={
            "tenant": tenant, "created_at": _t(now), "label": label or "", "size": size,
            "priority": submission.priority,
        })
        if submission.callback_url:
            pipe.hset(bkey, mapping={"callback_url": submission.callback_url,
                                     "callback_status": "waiting", "callback_attempts": 0})
            pipe.zadd(f"{self.p}callbacks", {batch_id: now})
        pipe.expire(bkey, ttl)
        tb = f"{self.p}t:{tenant}:batches"
        pipe.zadd(tb, {batch_id: now})
        pipe.zremrangebyscore(tb, "-inf", now - self.retention_s)
        pipe.expire(tb, ttl)
        pipe.execute()
