"""One store object per process, opened from the runtime configuration.

Worker pool processes are forked from the worker's main process; a store (and its connections)
opened before the fork must not be shared, so the cache is keyed by process id.
"""

from __future__ import annotations

import os
import threading

from service.store import DEFAULT_RETENTION_S, Store, open_store
from workers.runtime_config import RuntimeConfig, load_config

_lock = threading.Lock()
_stores: dict[int, Store] = {}


def open_configured_store(config: RuntimeConfig) -> Store:
    """A new store at ``config.store_url`` (retention from ``BALLAST_RETENTION_S``, as the API)."""
    if config.layout == "embedded":
        config.data_dir.mkdir(parents=True, exist_ok=True)
    retention_s = float(os.environ.get("BALLAST_RETENTION_S") or DEFAULT_RETENTION_S)
    return open_store(config.store_url, retention_s=retention_s)


def process_store(config: RuntimeConfig | None = None) -> Store:
    """This process's store, opened on first use."""
    pid = os.getpid()
    store = _stores.get(pid)
    if store is None:
        with _lock:
            store = _stores.get(pid)
            if store is None:
                _stores.clear()  # entries inherited from a parent process are not ours
                store = _stores[pid] = open_configured_store(config or load_config())
    return store
