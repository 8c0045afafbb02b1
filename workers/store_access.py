"""The stores of a worker process, opened from the runtime configuration.

Worker pool processes are forked from the worker's main process; stores (and their connections)
opened before the fork must not be shared, so the cache is keyed by process id. On Redis, their
client retries through a restart of the server (``redis_backend.patient_retry``).
"""

from __future__ import annotations

import os
import threading

from workers.runtime_config import RuntimeConfig, load_config
from workers.store import DEFAULT_RETENTION_S, Stores, open_stores
from workers.store.redis_backend.connection import patient_retry

_lock = threading.Lock()
_stores: dict[int, Stores] = {}


def open_configured_stores(config: RuntimeConfig) -> Stores:
    """New stores at ``config.store_url`` (retention from ``BALLAST_RETENTION_S``, as the API)."""
    if config.layout == "embedded":
        config.data_dir.mkdir(parents=True, exist_ok=True)
    retention_s = float(os.environ.get("BALLAST_RETENTION_S") or DEFAULT_RETENTION_S)
    return open_stores(config.store_url, retention_s=retention_s, redis_retry=patient_retry())


def process_stores(config: RuntimeConfig | None = None) -> Stores:
    """This process's stores, opened on first use."""
    pid = os.getpid()
    stores = _stores.get(pid)
    if stores is None:
        with _lock:
            stores = _stores.get(pid)
            if stores is None:
                _stores.clear()  # entries inherited from a parent process are not ours
                stores = _stores[pid] = open_configured_stores(config or load_config())
    return stores
