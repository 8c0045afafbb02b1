"""Reading checks and batches from Redis (keys: see ``workers.store.redis_backend``)."""

from __future__ import annotations

import json
import threading
from typing import Any

from redis.client import NEVER_DECODE

from workers.store.records import (
    UNKNOWN_ENCODING,
    BatchRecord,
    CheckRecord,
    StoredRequest,
    VerdictSummary,
)
from workers.store.redis_backend.connection import RedisBase

SHARED_CACHE_BYTES = 64 * 1024 * 1024  # shared bytes kept per store object, by content hash

FIELDS = (
    "tenant", "status", "created_at", "updated_at", "attempts", "batch_id", "label", "started_at",
    "finished_at", "lease_expires_at", "error", "verdict_name", "unstable_count",
    "first_frequency_hz", "first_node", "extends", "priority", "request_id", "worker",
)


def _num(text: str | None) -> float | None:
    return float(text) if text not in (None, "") else None


def _record(check_id: str, values: list[str | None], verdict_text: str | None) -> CheckRecord:
    f = dict(zip(FIELDS, values, strict=True))
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
        extends=f["extends"] or None,
        priority="urgent" if f["priority"] == "urgent" else "normal",
        request_id=f["request_id"] or None, worker=f["worker"] or None,
    )


class RedisCheckReads(RedisBase):
    """Records, stored requests, batches and their pages."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self._shared: dict[str, bytes] = {}  # by content hash: never changes under its key
        self._shared_size = 0
        self._shared_lock = threading.Lock()

    def _records(self, ids: list[str], with_verdict: bool) -> list[CheckRecord | None]:
        if not ids:
            return []
        pipe = self.r.pipeline(transaction=False)
        for cid in ids:
            pipe.hmget(f"{self.p}check:{cid}", FIELDS)
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

    def get_request(self, check_id: str) -> StoredRequest | None:
        pipe = self.r.pipeline(transaction=False)
        pipe.execute_command("GET", f"{self.p}req:{check_id}", **{NEVER_DECODE: []})
        pipe.hmget(f"{self.p}check:{check_id}", ["encoding", "shared"])
        payload, (encoding, shared) = pipe.execute()
        if payload is None:
            return None
        blobs = self._shared_bytes((shared or "").split())
        if blobs is None:
            return None
        return StoredRequest(payload, encoding or UNKNOWN_ENCODING, blobs)

    def _shared_bytes(self, digests: list[str]) -> dict[str, bytes] | None:
        """The shared bytes under ``digests``, read once per store object (a ``blob:`` key is
        named by the SHA-256 of its content, so what it holds never changes); None if one is
        gone."""
        found = {d: self._shared[d] for d in digests if d in self._shared}
        missing = [d for d in digests if d not in found]
        if missing:
            pipe = self.r.pipeline(transaction=False)
            for digest in missing:
                pipe.execute_command("GET", f"{self.p}blob:{digest}", **{NEVER_DECODE: []})
            for digest, body in zip(missing, pipe.execute(), strict=True):
                if body is None:
                    return None
                found[digest] = body
                self._remember(digest, body)
        return found

    def _remember(self, digest: str, body: bytes) -> None:
        if len(body) > SHARED_CACHE_BYTES or digest in self._shared:
            return
        with self._shared_lock:  # API processes share one store between their threads
            while self._shared and self._shared_size + len(body) > SHARED_CACHE_BYTES:
                self._shared_size -= len(self._shared.pop(next(iter(self._shared))))
            self._shared[digest] = body
            self._shared_size += len(body)

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
            priority="urgent" if head.get("priority") == "urgent" else "normal",
            callback_url=head.get("callback_url") or None,
            callback_status=head.get("callback_status") or None,  # type: ignore[arg-type]
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

    def count_unfinished(self, tenant: str) -> int:
        return int(self.r.scard(f"{self.p}t:{tenant}:open"))
