"""The Celery application: JSON messages carrying check ids, late acknowledgement, one at a time.

Start a worker with ``celery -A workers.celery_app worker`` (or ``ballast worker``). The broker is
the Redis named by ``BALLAST_REDIS_URL``, or the embedded SQLite broker (see
``workers.runtime_config``). Results are never stored by Celery: the task writes the verdict into
the service's own store, so there is no result backend.
"""

from __future__ import annotations

import os
from typing import Any

from workers.metrics_dir import use_metrics_dir
from workers.threads import pin_engine_threads

# One BLAS thread per worker process, set before numpy is first imported (by workers.tasks);
# the host's metrics folder before prometheus_client is first imported (workers.metrics).
pin_engine_threads(os.environ)
use_metrics_dir(os.environ)

from celery import Celery  # noqa: E402 (after the thread settings)

from workers.logs import configure_json_logging  # noqa: E402
from workers.runtime_config import (  # noqa: E402
    CHECK_QUEUE,
    PRIORITY_STEPS,
    RuntimeConfig,
    load_config,
)

REDIS_TRANSPORT = "workers.redis_transport:Transport"
SQLITE_TRANSPORT = "workers.sqlite_transport:Transport"


def celery_settings(config: RuntimeConfig) -> dict[str, Any]:
    """Celery settings for ``config`` (a plain dict so that tests can inspect it)."""
    settings: dict[str, Any] = {
        "broker_url": config.broker_url,
        # Only JSON crosses the queue; a pickle payload is refused by the worker.
        "task_serializer": "json",
        "accept_content": ["json"],
        "result_serializer": "json",
        "result_accept_content": ["json"],
        "result_backend": None,
        "task_ignore_result": True,
        "task_store_errors_even_if_ignored": False,
        # Redelivery when a worker dies mid-check: acknowledge after the task, requeue when the
        # pool process is lost, and reserve one message per process so that nothing waits behind
        # a long check.
        "task_acks_late": True,
        "task_reject_on_worker_lost": True,
        "task_acks_on_failure_or_timeout": True,
        "worker_prefetch_multiplier": 1,
        "task_soft_time_limit": config.soft_time_limit_s,
        "task_time_limit": config.hard_time_limit_s,
        # How long the pool waits for a dead process's result before raising WorkerLostError
        # (Celery's default 10 s). It must stay well below the hard limit, or a crash would be
        # reported as a time-out when the hard-limit timer fires first.
        "worker_lost_wait": min(10.0, config.hard_time_limit_s / 4),
        "task_default_queue": CHECK_QUEUE,
        "task_create_missing_queues": True,
        "broker_connection_retry_on_startup": True,
        "broker_connection_max_retries": None,
        # Keep running checks when the broker connection drops; their store writes decide the
        # outcome and a redelivered duplicate is refused by the store's compare-and-set claim.
        "worker_cancel_long_running_tasks_on_connection_loss": False,
        "worker_send_task_events": False,
        "task_send_sent_event": False,
        "worker_hijack_root_logger": False,
        "worker_redirect_stdouts": False,
        "broker_pool_limit": 10,
    }
    if config.layout == "redis" and config.broker_url.startswith(("redis://", "rediss://")):
        settings["broker_transport"] = REDIS_TRANSPORT
        settings["broker_transport_options"] = {
            "visibility_timeout": config.visibility_timeout_s,
            "restore_interval_s": config.restore_interval_s,
            "socket_timeout": 30,
            "socket_connect_timeout": 5,
            "socket_keepalive": True,
            "retry_on_timeout": True,
            "health_check_interval": 10,
            # one list per queue and priority: urgent (0) before normal (5), tenants' queues
            # taken in turn (kombu's default round_robin queue order)
            "priority_steps": list(PRIORITY_STEPS),
            "queue_order_strategy": "round_robin",
        }
    elif config.broker_url.startswith("sqlite:///"):
        # The embedded broker: one SQLite file polled every 0.1 s (workers.sqlite_transport).
        settings["broker_transport"] = SQLITE_TRANSPORT
        settings["broker_transport_options"] = {
            "polling_interval": 0.1, "max_drain_wait_s": 0.1, "busy_timeout_ms": 30_000,
        }
        # A virtual transport on a file has no fanout exchange: Celery's broadcast remote control
        # is off (the heartbeat in workers.lifecycle tells /readyz that workers are alive).
        settings["worker_enable_remote_control"] = False
    return settings


def make_app(config: RuntimeConfig | None = None) -> Celery:
    """A Celery app for ``config`` with the check task registered."""
    config = config or load_config()
    celery_app = Celery("ballast", set_as_current=False)
    celery_app.conf.update(celery_settings(config))
    celery_app.conf.include = ["workers.tasks", "workers.lifecycle"]
    return celery_app


config = load_config()
app = make_app(config)
configure_json_logging()
