"""What a worker's main process runs beside Celery: the heartbeat, the reconciler, the discovery
of tenants' queues (a worker starts consuming a tenant's queue within ``QUEUE_REFRESH_S`` of its
token, or of its first check: Celery's ``Consumer.add_task_queue``, what its ``add_consumer``
control command does, called on the consumer's event loop with ``call_soon``) and the sender of
batch callbacks.

Connected to Celery's ``worker_ready`` / ``worker_shutdown`` signals, so every worker started with
``celery -A workers.celery_app worker`` or ``ballast worker`` takes part; the pool processes that
run checks do not.
"""

from __future__ import annotations

import logging
import threading
from typing import Any

from celery.signals import worker_ready, worker_shutdown

from workers.callbacks.sender import CallbackSender
from workers.celery_app import config
from workers.heartbeat import beat, forget, live_instances
from workers.queue import enqueue, queue_size
from workers.reconciler import Reconciler
from workers.runtime_config import tenant_queue
from workers.store import Stores
from workers.store_access import open_configured_stores

log = logging.getLogger("ballast.worker")

QUEUE_REFRESH_S = 1.0


class _TenantQueues:
    """Every ``QUEUE_REFRESH_S``, the tenants that have tokens or have queued checks; a queue not
    consumed yet is handed to the consumer's event loop to start consuming (so a tenant's queue
    is consumed from the moment its token exists, before its first check)."""

    def __init__(self, consumer: Any, stores: Stores) -> None:
        self.consumer = consumer
        self.stores = stores
        self.consumed: set[str] = set()
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._loop, name="ballast-queues", daemon=True)

    def _loop(self) -> None:
        while True:
            try:
                known = set(self.stores.checks.tenants())
                known.update(t.tenant for t in self.stores.access.list_tokens())
                for tenant in sorted(known):
                    name = tenant_queue(tenant)
                    if name not in self.consumed:
                        self.consumed.add(name)
                        self.consumer.call_soon(self._consume, name)
            except Exception as exc:  # the store may be restarting
                log.warning("could not list the tenants' queues: %s", exc)
            if self._stop.wait(QUEUE_REFRESH_S):
                return

    def _consume(self, name: str) -> None:
        """On the consumer's event loop: start consuming ``name`` (again after a reconnect)."""
        if self.consumer.task_consumer is None:  # reconnecting: try again on the next pass
            self.consumed.discard(name)
            return
        self.consumer.add_task_queue(name, exchange=name, exchange_type="direct",
                                     routing_key=name)

    def start(self) -> None:
        self._thread.start()

    def stop(self) -> None:
        self._stop.set()
        self._thread.join(timeout=5)


class _Heartbeat:
    def __init__(self, worker_name: str) -> None:
        self.worker_name = worker_name
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._loop, name="ballast-heartbeat", daemon=True)

    def _loop(self) -> None:
        period = config.heartbeat_ttl_s / 3
        while True:
            try:
                beat(config, self.worker_name)
            except Exception as exc:  # the store's Redis may be restarting
                log.warning("heartbeat failed: %s", exc)
            if self._stop.wait(period):
                return

    def start(self) -> None:
        self._thread.start()

    def stop(self) -> None:
        self._stop.set()
        self._thread.join(timeout=5)
        try:
            forget(config, self.worker_name)
        except Exception as exc:
            log.warning("could not remove heartbeat: %s", exc)


_running: dict[str, Any] = {}


@worker_ready.connect
def _start_services(sender: Any = None, **_: Any) -> None:
    name = str(getattr(sender, "hostname", None) or "worker")
    heartbeat = _Heartbeat(name)
    heartbeat.start()
    stores = open_configured_stores(config)
    queues = _TenantQueues(sender, stores)
    queues.start()
    reconciler = Reconciler(config, stores.checks, enqueue, queue_size, owner=name,
                            access=stores.access, live_workers=lambda: live_instances(config))
    reconciler.start()
    callbacks = CallbackSender(stores.checks, stores.access)
    callbacks.start()
    _running.update(heartbeat=heartbeat, reconciler=reconciler, queues=queues,
                    callbacks=callbacks)
    log.info("ballast worker %s ready (layout %s, max attempts %d, limits %g/%g s)", name,
             config.layout, config.max_attempts, config.soft_time_limit_s,
             config.hard_time_limit_s)


@worker_shutdown.connect
def _stop_services(**_: Any) -> None:
    for part in ("queues", "reconciler", "callbacks"):
        service = _running.pop(part, None)
        if service is not None:
            service.stop()
    heartbeat = _running.pop("heartbeat", None)
    if heartbeat is not None:
        heartbeat.stop()
