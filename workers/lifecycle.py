"""What a worker's main process runs beside Celery: the heartbeat and the reconciler.

Connected to Celery's ``worker_ready`` / ``worker_shutdown`` signals, so every worker started with
``celery -A workers.celery_app worker`` or ``ballast worker`` takes part; the pool processes that
run checks do not.
"""

from __future__ import annotations

import logging
import threading
from typing import Any

from celery.signals import worker_ready, worker_shutdown

from workers.celery_app import app, config
from workers.heartbeat import beat, forget
from workers.queue import enqueue
from workers.reconciler import Reconciler
from workers.runtime_config import CHECK_QUEUE
from workers.store_access import open_configured_stores

log = logging.getLogger("ballast.worker")


def broker_queue_size() -> int:
    """Messages waiting in the check queue (not counting those delivered and unacknowledged)."""
    with app.connection_for_write() as connection, connection.channel() as channel:
        return int(channel.queue_declare(queue=CHECK_QUEUE).message_count)


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
    reconciler = Reconciler(config, stores.checks, enqueue, broker_queue_size, owner=name,
                            access=stores.access)
    reconciler.start()
    _running.update(heartbeat=heartbeat, reconciler=reconciler)
    log.info("ballast worker %s ready (layout %s, max attempts %d, limits %g/%g s)", name,
             config.layout, config.max_attempts, config.soft_time_limit_s,
             config.hard_time_limit_s)


@worker_shutdown.connect
def _stop_services(**_: Any) -> None:
    reconciler = _running.pop("reconciler", None)
    if reconciler is not None:
        reconciler.stop()
    heartbeat = _running.pop("heartbeat", None)
    if heartbeat is not None:
        heartbeat.stop()
