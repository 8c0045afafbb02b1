"""Redis implementation of the store, for several API and worker hosts sharing one Redis server.

Keys (all under ``prefix``): ``check:{id}`` (hash), ``req:{id}`` and ``verdict:{id}`` (JSON text),
``blob:{sha256}`` (a batch's shared map, stored once), ``batch:{id}`` (hash), ``batch:{id}:ids``
(list, submission order), ``batch:{id}:counts`` (hash ``s:<status>``/``v:<verdict>``), per tenant
``t:{tenant}:batches`` (zset), ``t:{tenant}:open`` (unfinished ids), ``t:{tenant}:idem:{key}``,
``t:{tenant}:rate:{window}``; global ``queued`` and ``leases`` (zsets scored by time) for the
reconciler; ``token:{sha256}`` and ``tokens``. Everything a check owns carries a TTL equal to the
retention, renewed at each state change.

Status changes are Lua scripts (atomic compare-and-set on the ``status`` field). The scripts touch
keys derived from the record, so this targets a single Redis server, not Redis Cluster.
"""

from __future__ import annotations

import json
import threading
import time
from collections.abc import Callable
from typing import Any

import redis
from redis.client import NEVER_DECODE

from service.store.base import (
    DEFAULT_RETENTION_S,
    RELEASED_LEASE_AGE_S,
    BatchRecord,
    CheckRecord,
    CheckSource,
    IdempotencyState,
    NewCheck,
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

STORE_CHUNK_BYTES = 4_000_000  # request bytes per MULTI/EXEC while storing many checks
STORE_CHUNK_CHECKS = 200
SHARED_CACHE_ENTRIES = 64  # shared maps kept per store object (each a few kilobytes)


# Shared Lua helper: move a check from its current status to ``to`` and keep every index in step.
_LUA_MOVE = """
local function move(P, id, ck, from, to, now, ttl)
  local batch = redis.call('HGET', ck, 'batch_id')
  local tenant = redis.call('HGET', ck, 'tenant')
  redis.call('HSET', ck, 'status', to, 'updated_at', now)
  if batch and batch ~= '' then
    local counts = P .. 'batch:' .. batch .. ':counts'
    redis.call('HINCRBY', counts, 's:' .. from, -1)
    redis.call('HINCRBY', counts, 's:' .. to, 1)
    redis.call('EXPIRE', counts, ttl)
  end
  if to == 'done' or to == 'failed' or to == 'cancelled' then
    redis.call('HSET', ck, 'finished_at', now)
    redis.call('HDEL', ck, 'lease_expires_at')
    redis.call('SREM', P .. 't:' .. tenant .. ':open', id)
    redis.call('ZREM', P .. 'queued', id)
    redis.call('ZREM', P .. 'leases', id)
  end
  redis.call('EXPIRE', ck, ttl)
  redis.call('EXPIRE', P .. 'req:' .. id, ttl)
  local shared = redis.call('HGET', ck, 'shared_hash')
  if shared and shared ~= '' then redis.call('EXPIRE', P .. 'blob:' .. shared, ttl) end
end
"""

# ARGV: prefix, id, now, lease_until, max_attempts, ttl, reason
# -> 1 claimed, 2 failed (attempts used up), 0 not claimable
_LUA_CLAIM = _LUA_MOVE + """
local P, id = ARGV[1], ARGV[2]
local ck = P .. 'check:' .. id
local now = tonumber(ARGV[3])
local st = redis.call('HGET', ck, 'status')
if not st then return 0 end
if st == 'running' then
  local lease = tonumber(redis.call('HGET', ck, 'lease_expires_at') or '0')
  if lease >= now then return 0 end
elseif st ~= 'queued' then
  return 0
end
local attempts = tonumber(redis.call('HGET', ck, 'attempts') or '0')
if attempts >= tonumber(ARGV[5]) then
  move(P, id, ck, st, 'failed', ARGV[3], ARGV[6])
  redis.call('HSET', ck, 'error', string.format(ARGV[7], attempts))
  return 2
end
move(P, id, ck, st, 'running', ARGV[3], ARGV[6])
redis.call('HSET', ck, 'attempts', attempts + 1, 'started_at', ARGV[3],
           'lease_expires_at', ARGV[4])
redis.call('ZREM', P .. 'queued', id)
redis.call('ZADD', P .. 'leases', ARGV[4], id)
return 1
"""

# ARGV: prefix, id, now, ttl, verdict json, verdict name, unstable_count, first freq, first node
_LUA_COMPLETE = _LUA_MOVE + """
local P, id = ARGV[1], ARGV[2]
local ck = P .. 'check:' .. id
if redis.call('HGET', ck, 'status') ~= 'running' then return 0 end
move(P, id, ck, 'running', 'done', ARGV[3], ARGV[4])
redis.call('SET', P .. 'verdict:' .. id, ARGV[5], 'EX', ARGV[4])
redis.call('HSET', ck, 'verdict_name', ARGV[6], 'unstable_count', ARGV[7],
           'first_frequency_hz', ARGV[8], 'first_node', ARGV[9])
local batch = redis.call('HGET', ck, 'batch_id')
if batch and batch ~= '' and ARGV[6] ~= '' then
  redis.call('HINCRBY', P .. 'batch:' .. batch .. ':counts', 'v:' .. ARGV[6], 1)
end
return 1
"""

# ARGV: prefix, id, now, ttl, reason, tenant-or-empty, target status
_LUA_FINISH = _LUA_MOVE + """
local P, id = ARGV[1], ARGV[2]
local ck = P .. 'check:' .. id
local st = redis.call('HGET', ck, 'status')
if st ~= 'queued' and st ~= 'running' then return 0 end
if ARGV[6] ~= '' and redis.call('HGET', ck, 'tenant') ~= ARGV[6] then return 0 end
move(P, id, ck, st, ARGV[7], ARGV[3], ARGV[4])
if ARGV[5] ~= '' then redis.call('HSET', ck, 'error', ARGV[5]) end
return 1
"""

# ARGV: prefix, id, ended (a time just before now)
_LUA_RELEASE = """
local P, id = ARGV[1], ARGV[2]
local ck = P .. 'check:' .. id
if redis.call('HGET', ck, 'status') ~= 'running' then return 0 end
redis.call('HSET', ck, 'lease_expires_at', ARGV[3])
redis.call('ZADD', P .. 'leases', ARGV[3], id)
return 1
"""

# KEYS[1] = batch ids list; ARGV: prefix, now, ttl, tenant
_LUA_CANCEL_BATCH = _LUA_MOVE + """
local P = ARGV[1]
local n = 0
for _, id in ipairs(redis.call('LRANGE', KEYS[1], 0, -1)) do
  local ck = P .. 'check:' .. id
  local st = redis.call('HGET', ck, 'status')
  if (st == 'queued' or st == 'running') and redis.call('HGET', ck, 'tenant') == ARGV[4] then
    move(P, id, ck, st, 'cancelled', ARGV[2], ARGV[3])
    n = n + 1
  end
end
return n
"""

# KEYS[1] = idempotency key; ARGV: body hash, pending ttl (ms)
_LUA_IDEM_BEGIN = """
local h = redis.call('HGET', KEYS[1], 'body_hash')
if not h then
  redis.call('HSET', KEYS[1], 'body_hash', ARGV[1])
  redis.call('PEXPIRE', KEYS[1], ARGV[2])
  return {'new', ''}
end
if h ~= ARGV[1] then return {'mismatch', ''} end
local c = redis.call('HGET', KEYS[1], 'check_id')
if not c then return {'pending', ''} end
return {'done', c}
"""

# KEYS[1] = the tenant's unfinished set; ARGV: limit (-1: none), ids... -> {accepted, unfinished}
_LUA_RESERVE = """
local n = redis.call('SCARD', KEYS[1])
local limit = tonumber(ARGV[1])
if limit >= 0 and n + #ARGV - 1 > limit then return {0, n} end
for i = 2, #ARGV do redis.call('SADD', KEYS[1], ARGV[i]) end
return {1, n}
"""

_LUA_IDEM_RELEASE = """
if redis.call('HEXISTS', KEYS[1], 'check_id') == 0 then redis.call('DEL', KEYS[1]) end
return 1
"""

_FIELDS = (
    "tenant", "status", "created_at", "updated_at", "attempts", "batch_id", "label", "started_at",
    "finished_at", "lease_expires_at", "error", "verdict_name", "unstable_count",
    "first_frequency_hz", "first_node",
)


def _num(text: str | None) -> float | None:
    return float(text) if text not in (None, "") else None


def _record(check_id: str, values: list[str | None], verdict_text: str | None) -> CheckRecord:
    f = dict(zip(_FIELDS, values, strict=True))
    summary = None
    if f["status"] == "done":
        count = f["unstable_count"]
        summary = VerdictSummary(
            verdict=f["verdict_name"] or None,
            unstable_count=int(count) if count not in (None, "") else None,
            first_frequency_hz=_num(f["first_frequency_hz"]),
            first_node=f["first_node"] or None,
        )
    return CheckRecord(
        id=check_id, tenant=f["tenant"] or "", status=f["status"],  # type: ignore[arg-type]
        created_at=float(f["created_at"] or 0), updated_at=float(f["updated_at"] or 0),
        attempts=int(f["attempts"] or 0), batch_id=f["batch_id"] or None,
        label=f["label"] if f["label"] not in (None, "") else None,
        started_at=_num(f["started_at"]), finished_at=_num(f["finished_at"]),
        lease_expires_at=_num(f["lease_expires_at"]), error=f["error"] or None,
        verdict=json.loads(verdict_text) if verdict_text is not None else None, summary=summary,
    )


def _t(value: float) -> str:
    return repr(float(value))


class RedisStore:
    """The store on a Redis server; ``prefix`` separates deployments (and tests) sharing one."""

    def __init__(
        self, url: str = "redis://127.0.0.1:6379/0", *, prefix: str = "ballast:",
        retention_s: float = DEFAULT_RETENTION_S, clock: Callable[[], float] = time.time,
        client: redis.Redis | None = None,
    ) -> None:
        self.r = client if client is not None else redis.Redis.from_url(
            url, decode_responses=True, health_check_interval=30,
            socket_connect_timeout=5, socket_timeout=30, retry_on_timeout=True,
        )
        self.p = prefix
        self.retention_s = float(retention_s)
        self.clock = clock
        self._claim = self.r.register_script(_LUA_CLAIM)
        self._complete = self.r.register_script(_LUA_COMPLETE)
        self._finish = self.r.register_script(_LUA_FINISH)
        self._release = self.r.register_script(_LUA_RELEASE)
        self._cancel_batch = self.r.register_script(_LUA_CANCEL_BATCH)
        self._idem_begin = self.r.register_script(_LUA_IDEM_BEGIN)
        self._idem_release = self.r.register_script(_LUA_IDEM_RELEASE)
        self._reserve = self.r.register_script(_LUA_RESERVE)
        self._shared_texts: dict[str, str] = {}  # shared maps by content hash (immutable)
        self._shared_lock = threading.Lock()

    @property
    def _ttl(self) -> int:
        return max(int(self.retention_s), 1)

    def ping(self) -> bool:
        try:
            return bool(self.r.ping())
        except redis.RedisError:
            return False

    def close(self) -> None:
        self.r.close()

    # -- accepting work ---------------------------------------------------------------------------
    def create_checks(
        self, tenant: str, checks: CheckSource, *, batch_label: str | None = None,
        as_batch: bool = False, shared: dict[str, Any] | None = None,
        max_unfinished: int | None = None,
        on_stored: Callable[[list[str]], None] | None = None,
    ) -> tuple[str | None, list[str]]:
        """Reserve the tenant's quota (Lua), then write the checks in chunks of about
        ``STORE_CHUNK_BYTES`` (one MULTI/EXEC each) as ``checks`` yields them, calling
        ``on_stored`` after each chunk so that workers start while the rest is written; the
        batch record is written last. If anything fails, iterating ``checks`` included, the
        checks already written are deleted again (:meth:`_discard`)."""
        now = self.clock()
        batch_id = new_batch_id() if as_batch else None
        shared_hash = content_hash(shared) if shared is not None else None
        ids = [new_check_id() for _ in range(len(checks))]
        open_key = f"{self.p}t:{tenant}:open"
        accepted, unfinished = self._reserve(
            keys=[open_key], args=[-1 if max_unfinished is None else max_unfinished, *ids])
        if not int(accepted):
            raise QuotaExceededError(int(max_unfinished or 0), int(unfinished), len(checks))
        stored = 0
        try:
            if shared is not None:
                blob = f"{self.p}blob:{shared_hash}"
                pipe = self.r.pipeline(transaction=True)
                pipe.set(blob, canonical_json(shared), ex=self._ttl, nx=True)
                pipe.expire(blob, self._ttl)
                pipe.execute()
            pending: list[NewCheck] = []
            size = 0
            for n, check in enumerate(checks, start=1):  # a lazy sequence may validate here
                pending.append(check)
                size += check.stored_size()
                if (len(pending) >= STORE_CHUNK_CHECKS or size >= STORE_CHUNK_BYTES
                        or n == len(ids)):
                    first = stored
                    stored = self._store_chunk(tenant, ids, pending, first, now, batch_id,
                                               shared_hash)
                    if on_stored is not None:
                        on_stored(ids[first:stored])
                    pending, size = [], 0
            if pending or stored != len(ids):
                raise ValueError(f"{stored + len(pending)} checks given where len() said "
                                 f"{len(ids)}")
            if batch_id is not None:
                self._store_batch(tenant, batch_id, batch_label, len(ids), shared_hash, now)
        except BaseException:
            self._discard(tenant, ids, batch_id)
            raise
        return batch_id, ids

    def _store_chunk(self, tenant: str, ids: list[str], chunk: list[NewCheck], first: int,
                     now: float, batch_id: str | None, shared_hash: str | None) -> int:
        """``chunk`` as ``queued`` under ``ids[first:]`` (with its batch's id list and counts);
        returns how many checks are stored now."""
        ttl = self._ttl
        stop = first + len(chunk)
        pipe = self.r.pipeline(transaction=True)
        for seq, c in enumerate(chunk, start=first):
            ck = f"{self.p}check:{ids[seq]}"
            pipe.hset(ck, mapping={
                "tenant": tenant, "status": "queued", "created_at": _t(now),
                "updated_at": _t(now), "attempts": 0, "batch_id": batch_id or "",
                "seq": seq, "label": c.label if c.label is not None else "",
                "shared_hash": shared_hash or "",
            })
            pipe.expire(ck, ttl)
            pipe.set(f"{self.p}req:{ids[seq]}", c.stored_payload(), ex=ttl)  # bytes as they are
        pipe.zadd(f"{self.p}queued", dict.fromkeys(ids[first:stop], now))
        if batch_id is not None:
            bkey = f"{self.p}batch:{batch_id}"
            pipe.rpush(f"{bkey}:ids", *ids[first:stop])
            pipe.hincrby(f"{bkey}:counts", "s:queued", stop - first)
            for key in (f"{bkey}:ids", f"{bkey}:counts"):
                pipe.expire(key, ttl)
        pipe.execute()
        return stop

    def _discard(self, tenant: str, ids: list[str], batch_id: str | None) -> None:
        """Undo a ``create_checks`` that did not finish: delete whatever was written of its
        checks (all ids: a chunk whose EXEC failed on the way may or may not be there; a message
        already queued for one then finds no check and does nothing, a worker already running one
        finds no check to complete) and give the whole reservation back."""
        try:
            pipe = self.r.pipeline(transaction=True)
            for cid in ids:
                pipe.delete(f"{self.p}check:{cid}", f"{self.p}req:{cid}",
                            f"{self.p}verdict:{cid}")
            if ids:
                pipe.zrem(f"{self.p}queued", *ids)
                pipe.zrem(f"{self.p}leases", *ids)
                pipe.srem(f"{self.p}t:{tenant}:open", *ids)
            if batch_id is not None:
                bkey = f"{self.p}batch:{batch_id}"
                pipe.delete(bkey, f"{bkey}:ids", f"{bkey}:counts")
                pipe.zrem(f"{self.p}t:{tenant}:batches", batch_id)
            pipe.execute()
        except redis.RedisError:
            pass  # records left behind run as usual and expire; the purge drops reserved ids

    def _store_batch(self, tenant: str, batch_id: str, label: str | None, size: int,
                     shared_hash: str | None, now: float) -> None:
        """The batch's own record and its place in the tenant's list: written last."""
        ttl = self._ttl
        bkey = f"{self.p}batch:{batch_id}"
        pipe = self.r.pipeline(transaction=True)
        pipe.hset(bkey, mapping={
            "tenant": tenant, "created_at": _t(now), "label": label or "",
            "size": size, "shared_hash": shared_hash or "",
        })
        pipe.expire(bkey, ttl)
        tb = f"{self.p}t:{tenant}:batches"
        pipe.zadd(tb, {batch_id: now})
        pipe.zremrangebyscore(tb, "-inf", now - self.retention_s)
        pipe.expire(tb, ttl)
        pipe.execute()

    # -- reading ----------------------------------------------------------------------------------
    def _records(self, ids: list[str], with_verdict: bool) -> list[CheckRecord | None]:
        if not ids:
            return []
        pipe = self.r.pipeline(transaction=False)
        for cid in ids:
            pipe.hmget(f"{self.p}check:{cid}", _FIELDS)
            if with_verdict:
                pipe.get(f"{self.p}verdict:{cid}")
        raw = pipe.execute()
        step = 2 if with_verdict else 1
        out: list[CheckRecord | None] = []
        for i, cid in enumerate(ids):
            values = raw[i * step]
            if values[1] is None:  # no status: gone (expired) or never existed
                out.append(None)
                continue
            out.append(_record(cid, values, raw[i * step + 1] if with_verdict else None))
        return out

    def get_check_any(self, check_id: str) -> CheckRecord | None:
        return self._records([check_id], with_verdict=True)[0]

    def get_check(self, tenant: str, check_id: str) -> CheckRecord | None:
        record = self.get_check_any(check_id)
        return record if record is not None and record.tenant == tenant else None

    def get_request(self, check_id: str) -> dict[str, Any] | None:
        pipe = self.r.pipeline(transaction=False)
        # as bytes: the stored request may be in the binary form (service.store.payload)
        pipe.execute_command("GET", f"{self.p}req:{check_id}", **{NEVER_DECODE: []})
        pipe.hget(f"{self.p}check:{check_id}", "shared_hash")
        text, shared_hash = pipe.execute()
        if text is None:
            return None
        shared = None
        if shared_hash:
            body = self._shared_texts.get(shared_hash)
            if body is None:
                body = self.r.get(f"{self.p}blob:{shared_hash}")
                if body is None:
                    return None
                self._remember_shared(shared_hash, body)
            shared = loads_json(body)
        return merge_request(shared, load_request(text))

    def _remember_shared(self, shared_hash: str, body: str) -> None:
        """Keep a shared map's text: a ``blob:`` key is named by the SHA-256 of its content, so
        the text under a hash never changes (the workers of a batch read it once each)."""
        with self._shared_lock:  # API processes share one store between their threads
            while len(self._shared_texts) >= SHARED_CACHE_ENTRIES:
                self._shared_texts.pop(next(iter(self._shared_texts)))
            self._shared_texts[shared_hash] = body

    @staticmethod
    def _split_counts(raw: dict[str, str]) -> tuple[dict[str, int], dict[str, int]]:
        by_status = {k[2:]: int(v) for k, v in raw.items() if k.startswith("s:") and int(v) > 0}
        by_verdict = {k[2:]: int(v) for k, v in raw.items() if k.startswith("v:") and int(v) > 0}
        return by_status, by_verdict

    def _batch(self, tenant: str, batch_id: str, with_ids: bool) -> BatchRecord | None:
        bkey = f"{self.p}batch:{batch_id}"
        pipe = self.r.pipeline(transaction=False)
        pipe.hgetall(bkey)
        pipe.hgetall(f"{bkey}:counts")
        if with_ids:
            pipe.lrange(f"{bkey}:ids", 0, -1)
        raw = pipe.execute()
        head = raw[0]
        if not head or head.get("tenant") != tenant:
            return None
        by_status, by_verdict = self._split_counts(raw[1])
        return BatchRecord(
            id=batch_id, tenant=tenant, created_at=float(head["created_at"]),
            check_ids=tuple(raw[2]) if with_ids else (), label=head.get("label") or None,
            counts_by_status=by_status, counts_by_verdict=by_verdict,
        )

    def get_batch(self, tenant: str, batch_id: str) -> BatchRecord | None:
        return self._batch(tenant, batch_id, with_ids=True)

    def list_batches(self, tenant: str, limit: int = 50) -> list[BatchRecord]:
        tb = f"{self.p}t:{tenant}:batches"
        ids = self.r.zrevrange(tb, 0, max(int(limit), 1) - 1)
        out = []
        for bid in ids:
            record = self._batch(tenant, bid, with_ids=False)
            if record is not None:
                out.append(record)
        return out

    def list_batch_checks(
        self, tenant: str, batch_id: str, *, after: str | None, limit: int,
        status: str | None = None, verdict: str | None = None,
    ) -> tuple[list[CheckRecord], str | None]:
        head = self.r.hget(f"{self.p}batch:{batch_id}", "tenant")
        if head != tenant:
            return [], None
        ids_key = f"{self.p}batch:{batch_id}:ids"
        index = int(after) + 1 if after is not None else 0
        chunk = max(limit + 1, 200)
        found: list[tuple[int, CheckRecord]] = []
        while len(found) <= limit:
            ids = self.r.lrange(ids_key, index, index + chunk - 1)
            if not ids:
                break
            for offset, record in enumerate(self._records(ids, with_verdict=False)):
                if record is None or record.tenant != tenant:
                    continue
                if status is not None and record.status != status:
                    continue
                if verdict is not None and (
                    record.summary is None or record.summary.verdict != verdict
                ):
                    continue
                found.append((index + offset, record))
            index += len(ids)
        page = found[:limit]
        cursor = str(page[-1][0]) if len(found) > limit and page else None
        return [record for _, record in page], cursor

    # -- state changes ----------------------------------------------------------------------------
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

    # -- idempotency ------------------------------------------------------------------------------
    def _idem_key(self, tenant: str, key: str) -> str:
        return f"{self.p}t:{tenant}:idem:{content_hash(key)}"

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

    # -- tenants, tokens, limits ------------------------------------------------------------------
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

    def count_unfinished(self, tenant: str) -> int:
        return int(self.r.scard(f"{self.p}t:{tenant}:open"))

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
