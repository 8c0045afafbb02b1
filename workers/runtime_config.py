"""Where the service keeps its store and its queue, and the limits of a check, from the environment.

Two layouts share one code path:

* distributed: ``BALLAST_REDIS_URL`` is set; the store and the broker both live in that Redis, and
  any number of API hosts and worker hosts point at it;
* embedded (the default): no Redis; the store is a SQLite file and the broker is a kombu transport
  on a second SQLite file (``workers.sqlite_transport``), both under ``BALLAST_DATA_DIR``
  (default ``./var``).

Every setting is an environment variable so that gunicorn, Celery workers and the reconciler, which
run in separate processes, agree without passing arguments around.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

Layout = Literal["redis", "embedded"]

CHECK_QUEUE = "ballast.checks"
RUN_CHECK_TASK = "ballast.run_check"
# Each tenant's checks wait in a queue of their own, which workers consume round-robin; within
# it, urgent messages are taken first (kombu message priorities: the lower number first, on the
# Redis transport and on the embedded SQLite one alike).
MESSAGE_PRIORITY = {"urgent": 0, "normal": 5}
PRIORITY_STEPS = (0, 5)
CHECK_HEADER = "ballast_check"  # message header naming the check (to withdraw cancelled ones)


def tenant_queue(tenant: str | None) -> str:
    """The queue of ``tenant``'s checks (``ballast.checks.<tenant>``); no tenant: the shared
    queue that messages of earlier versions used."""
    return f"{CHECK_QUEUE}.{tenant}" if tenant else CHECK_QUEUE


def _env_float(env: dict[str, str], name: str, default: float) -> float:
    raw = env.get(name, "").strip()
    if not raw:
        return default
    value = float(raw)
    if value <= 0:
        raise ValueError(f"{name} must be positive, got {raw!r}")
    return value


def _env_int(env: dict[str, str], name: str, default: int) -> int:
    raw = env.get(name, "").strip()
    if not raw:
        return default
    value = int(raw)
    if value < 1:
        raise ValueError(f"{name} must be at least 1, got {raw!r}")
    return value


@dataclass(frozen=True)
class RuntimeConfig:
    """Settings shared by the API, the workers and the reconciler.

    The hard time limit kills a check's process; the lease and the broker's visibility timeout
    must both outlast it, or a healthy long check would be handed to a second worker.
    """

    layout: Layout
    data_dir: Path
    redis_url: str | None
    broker_url: str
    store_url: str
    max_attempts: int = 3
    soft_time_limit_s: float = 300.0
    hard_time_limit_s: float = 330.0
    reconcile_interval_s: float = 5.0
    restore_interval_s: float = 10.0
    heartbeat_ttl_s: float = 15.0
    testing: bool = False

    @property
    def lease_s(self) -> float:
        """How long a claim holds a check: the hard limit plus a margin for store writes."""
        return self.hard_time_limit_s + max(5.0, 0.1 * self.hard_time_limit_s)

    @property
    def visibility_timeout_s(self) -> float:
        """Redis transport: how long an unacknowledged message waits before kombu restores it."""
        return self.lease_s + max(5.0, 0.1 * self.hard_time_limit_s)

    @property
    def heartbeat_dir(self) -> Path:
        return self.data_dir / "heartbeats"

    @property
    def reconciler_lock_path(self) -> Path:
        return self.data_dir / "reconciler.lock"


def load_config(environ: dict[str, str] | None = None) -> RuntimeConfig:
    """Read the configuration from ``environ`` (default: ``os.environ``)."""
    env = dict(os.environ if environ is None else environ)
    data_dir = Path(env.get("BALLAST_DATA_DIR") or "var").expanduser().resolve()
    redis_url = env.get("BALLAST_REDIS_URL", "").strip() or None
    if redis_url:
        layout: Layout = "redis"
        broker_url = env.get("BALLAST_BROKER_URL") or redis_url
        store_url = env.get("BALLAST_STORE_URL") or redis_url
    else:
        layout = "embedded"
        broker_file = data_dir / "broker.sqlite3"
        broker_url = env.get("BALLAST_BROKER_URL") or f"sqlite:///{broker_file}"
        store_url = env.get("BALLAST_STORE_URL") or f"sqlite:///{data_dir / 'store.sqlite3'}"
    soft = _env_float(env, "BALLAST_SOFT_TIME_LIMIT_S", 300.0)
    hard = _env_float(env, "BALLAST_HARD_TIME_LIMIT_S", max(soft + 30.0, 1.1 * soft))
    if hard <= soft:
        raise ValueError("BALLAST_HARD_TIME_LIMIT_S must exceed BALLAST_SOFT_TIME_LIMIT_S")
    return RuntimeConfig(
        layout=layout,
        data_dir=data_dir,
        redis_url=redis_url,
        broker_url=broker_url,
        store_url=store_url,
        max_attempts=_env_int(env, "BALLAST_MAX_ATTEMPTS", 3),
        soft_time_limit_s=soft,
        hard_time_limit_s=hard,
        reconcile_interval_s=_env_float(env, "BALLAST_RECONCILE_INTERVAL_S", 5.0),
        restore_interval_s=_env_float(env, "BALLAST_RESTORE_INTERVAL_S", 10.0),
        heartbeat_ttl_s=_env_float(env, "BALLAST_HEARTBEAT_TTL_S", 15.0),
        testing=env.get("BALLAST_TESTING") == "1",
    )
