"""The reconciler: puts back on the queue what the broker lost or a dead worker left behind.

Every ``reconcile_interval_s`` one reconciler (a leader lock elects one per tick across hosts):

* re-queues ``running`` checks whose worker has stopped sending heartbeats (its main process
  died: the heartbeat key expires after ``BALLAST_HEARTBEAT_TTL_S``), ending their lease now,
  so that they run again within about TTL + interval instead of after a whole lease;
* re-queues ``running`` checks whose lease has expired (their worker died or hung past the hard
  limit); the next claim counts the attempt, so a check that kills every worker ends ``failed``;
* for each tenant whose queue is empty, re-queues its ``queued`` checks older than
  ``stale_after_s``: with nothing waiting in the queue, such a check was never delivered (a
  publish that failed, a message dropped with a killed worker's prefetch);
* once an hour, purges what is older than the stores' retention (checks, batches, their shared
  bytes; expired idempotency keys).

Re-queuing twice is harmless (the claim is a compare-and-set), but a check is re-queued at most
once per back-off period (the lease for expired checks; ``stale_after_s`` for queued ones, whose
clock ``touch_queued`` restarts) so that a long queue does not fill with duplicates.
"""

from __future__ import annotations

import fcntl
import logging
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import IO

import redis

from workers.runtime_config import RuntimeConfig
from workers.store import AccessStore, CheckStore, Route

log = logging.getLogger("ballast.reconciler")

LEADER_KEY = "ballast:reconciler:leader"
PURGE_EVERY_S = 3600.0


@dataclass(frozen=True)
class TickReport:
    """What one reconciliation pass did."""

    expired: tuple[str, ...] = ()
    undelivered: tuple[str, ...] = ()
    orphaned: tuple[str, ...] = ()
    skipped_not_leader: bool = False


class LeaderLock:
    """At most one reconciler per tick: a Redis key with expiry, or a file lock on one machine."""

    def __init__(self, config: RuntimeConfig) -> None:
        self._config = config
        self._file: IO[str] | None = None
        self._redis = (
            redis.Redis.from_url(config.redis_url, socket_timeout=5, socket_connect_timeout=5)
            if config.layout == "redis" and config.redis_url
            else None
        )

    def acquire(self, owner: str) -> bool:
        if self._redis is not None:
            ttl_ms = max(1000, int(self._config.reconcile_interval_s * 900))
            return bool(self._redis.set(LEADER_KEY, owner, nx=True, px=ttl_ms))
        path: Path = self._config.reconciler_lock_path
        path.parent.mkdir(parents=True, exist_ok=True)
        handle = path.open("a")
        try:
            fcntl.flock(handle.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            handle.close()
            return False
        self._file = handle
        return True

    def release(self) -> None:
        if self._file is not None:
            fcntl.flock(self._file.fileno(), fcntl.LOCK_UN)
            self._file.close()
            self._file = None
        # the Redis key expires by itself before the next tick


class Reconciler:
    """One pass is :meth:`tick`; :meth:`start` runs passes on a daemon thread."""

    def __init__(
        self,
        config: RuntimeConfig,
        store: CheckStore,
        publish: Callable[..., None],
        queue_size: Callable[[str], int],
        *,
        owner: str = "reconciler",
        stale_after_s: float | None = None,
        access: AccessStore | None = None,
        live_workers: Callable[[], list[str]] | None = None,
    ) -> None:
        """``publish(ids, tenant=, priority=)`` queues checks; ``queue_size(tenant)`` counts the
        messages waiting in a tenant's queue; ``live_workers()`` names the worker instances with a
        heartbeat (``workers.heartbeat.live_instances``; None: no re-queue by heartbeat)."""
        self.config = config
        self.store = store
        self.access = access
        self.publish = publish
        self.queue_size = queue_size
        self.live_workers = live_workers
        self.owner = owner
        if stale_after_s is None:
            stale_after_s = max(3 * config.reconcile_interval_s, 10.0)
        self.stale_after_s = stale_after_s
        self._lock = LeaderLock(config)
        self._requeued_at: dict[str, float] = {}
        self._last_purge = float("-inf")
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None

    # -- one pass ---------------------------------------------------------------------------
    def _fresh(self, ids: list[str], now: float, backoff_s: float) -> list[str]:
        """The ids not re-queued within ``backoff_s``; remembers them as re-queued now."""
        chosen = [i for i in ids if now - self._requeued_at.get(i, -1e18) >= backoff_s]
        for check_id in chosen:
            self._requeued_at[check_id] = now
        horizon = now - max(self.config.lease_s, self.stale_after_s)
        for check_id in [i for i, t in self._requeued_at.items() if t < horizon]:
            del self._requeued_at[check_id]
        return chosen

    def tick(self, now: float | None = None) -> TickReport:
        now = time.time() if now is None else now
        if not self._lock.acquire(self.owner):
            return TickReport(skipped_not_leader=True)
        try:
            orphaned = self._orphans()
            for check_id in orphaned:
                self.store.release(check_id)  # its lease ends now: the next delivery claims it
            lost = sorted(set(self.store.expired_leases(now)) | set(orphaned))
            expired = self._fresh(lost, now, self.config.lease_s)
            undelivered = self._undelivered(now)
            todo = expired + undelivered
            if todo:
                self._publish_routed(todo)
                if undelivered:
                    # touch_queued restarts their clocks: no re-queue before stale_after_s
                    self.store.touch_queued(undelivered, now)
                log.warning("re-queued %d check(s) of workers without a heartbeat, %d expired "
                            "lease(s) and %d undelivered check(s)", len(orphaned),
                            len(set(expired) - set(orphaned)), len(undelivered))
            if now - self._last_purge >= PURGE_EVERY_S:
                self._last_purge = now
                purged = self.store.purge(now)
                if self.access is not None:
                    self.access.purge(now)
                if purged:
                    log.info("purged %d check(s) older than the retention", purged)
            return TickReport(expired=tuple(expired), undelivered=tuple(undelivered),
                              orphaned=tuple(orphaned))
        finally:
            self._lock.release()

    def _orphans(self) -> list[str]:
        """Running checks claimed by a worker instance (``<name>#<pid>``) that has no heartbeat
        now: gone, or restarted under its name as another instance. None are judged when no
        worker at all beats (this reconciler's own worker does, so the read failed)."""
        if self.live_workers is None:
            return []
        live = set(self.live_workers())
        if not live:
            return []
        return sorted(cid for cid, worker in self.store.running_workers().items()
                      if worker and worker not in live)

    def _undelivered(self, now: float) -> list[str]:
        """Queued checks older than ``stale_after_s`` of the tenants whose queue is empty."""
        empty = {t for t in self.store.tenants() if self.queue_size(t) == 0}
        if not empty:
            return []
        stale = self.store.queued_ids(older_than=now - self.stale_after_s)
        routes = self.store.routes(stale)
        return [cid for cid in stale if cid in routes and routes[cid].tenant in empty]

    def _publish_routed(self, check_ids: list[str]) -> None:
        """Publish each check to its tenant's queue at its priority."""
        groups: dict[Route, list[str]] = {}
        for check_id, route in self.store.routes(check_ids).items():
            groups.setdefault(route, []).append(check_id)
        for route, ids in groups.items():
            self.publish(ids, tenant=route.tenant, priority=route.priority)

    # -- background thread -------------------------------------------------------------------
    def _loop(self) -> None:
        while not self._stop.wait(self.config.reconcile_interval_s):
            try:
                self.tick()
            except Exception as exc:  # a store or broker outage: try again next tick
                log.warning("reconciler pass failed: %s", exc)

    def start(self) -> None:
        self._thread = threading.Thread(target=self._loop, name="ballast-reconciler", daemon=True)
        self._thread.start()

    def stop(self) -> None:
        self._stop.set()
        if self._thread is not None:
            self._thread.join(timeout=5)
