"""Publishing to the queues (the API and the reconciler), taking cancelled checks back out of
them, and whether any worker is alive.

Only check ids cross the queue; the request and the verdict stay in the store. Each tenant has a
queue of its own (``workers.runtime_config.tenant_queue``) that workers consume round-robin with
the other tenants' (kombu's ``round_robin`` queue order on Redis, its ``FairCycle`` on the
embedded broker), so a tenant with thousands of queued checks holds back another's only by the
checks already running or reserved. Urgent checks go in as messages of a higher priority.

Publishing is best-effort by design: the checks are already stored as ``queued`` when
:func:`enqueue` runs, and the workers' reconciler re-queues any queued check that the broker
never delivered, so a broker hiccup delays a check but cannot lose it.
"""

from __future__ import annotations

import logging
from collections.abc import Iterable
from contextlib import nullcontext
from typing import TYPE_CHECKING

from workers.heartbeat import live_workers
from workers.runtime_config import (
    CHECK_HEADER,
    MESSAGE_PRIORITY,
    RUN_CHECK_TASK,
    load_config,
    tenant_queue,
)

if TYPE_CHECKING:
    from celery import Celery

log = logging.getLogger("ballast.queue")

_PUBLISH_RETRY = {"max_retries": 2, "interval_start": 0.0, "interval_step": 0.2,
                  "interval_max": 0.5}


def publish(celery_app: Celery, check_ids: list[str], tenant: str | None = None,
            priority: str = "normal") -> None:
    """Publish one ``ballast.run_check`` message per id to ``tenant``'s queue through
    ``celery_app`` (one connection; on the Redis transport, one pipelined round trip:
    ``workers.redis_transport``). Each message names its check in a header."""
    queue = tenant_queue(tenant)
    level = MESSAGE_PRIORITY.get(priority, MESSAGE_PRIORITY["normal"])
    with celery_app.producer_or_acquire() as producer:
        collect = getattr(producer.channel, "collected_puts", None)
        with collect() if collect is not None else nullcontext():
            for check_id in check_ids:
                celery_app.send_task(
                    RUN_CHECK_TASK, args=[check_id], queue=queue, producer=producer,
                    retry=True, retry_policy=_PUBLISH_RETRY, ignore_result=True,
                    priority=level, headers={CHECK_HEADER: check_id},
                )


def load_publisher() -> None:
    """Import the Celery app now (a fraction of a second), so that an API process's first
    submission does not wait for it."""
    import workers.celery_app  # noqa: F401


def enqueue(check_ids: list[str], tenant: str | None = None, priority: str = "normal") -> None:
    """Hand the (already stored, ``queued``) checks to the workers; never raises for the broker."""
    if not check_ids:
        return
    from workers.celery_app import app  # celery is only imported by processes that publish

    try:
        publish(app, check_ids, tenant, priority)
    except Exception as exc:  # the reconciler delivers what was stored but not published
        log.warning("could not publish %d check(s) now (%s); the reconciler will", len(check_ids),
                    exc)


def _app(celery_app: Celery | None) -> Celery:
    if celery_app is not None:
        return celery_app
    from workers.celery_app import app

    return app


def withdraw(tenant: str, check_ids: Iterable[str], celery_app: Celery | None = None) -> int:
    """Remove the messages of ``check_ids`` (cancelled) from ``tenant``'s queue, so that they
    hold neither a worker nor the queue; returns how many went. Never raises for the broker: a
    message left behind finds its check cancelled and does nothing."""
    wanted = list(check_ids)
    if not wanted:
        return 0
    app = _app(celery_app)
    try:
        with app.connection_for_write() as connection:
            return int(connection.default_channel.withdraw(tenant_queue(tenant), wanted))
    except Exception as exc:
        log.warning("could not withdraw %d cancelled check(s) from the queue: %s",
                    len(wanted), exc)
        return 0


def queue_size(tenant: str | None, celery_app: Celery | None = None) -> int:
    """Messages waiting in ``tenant``'s queue (not counting those delivered, unacknowledged)."""
    with _app(celery_app).connection_for_write() as connection, connection.channel() as channel:
        return int(channel.queue_declare(queue=tenant_queue(tenant), passive=False)
                   .message_count)


def broker_reachable() -> bool:
    """True when a connection to the broker can be made now (for /readyz)."""
    from workers.celery_app import app

    try:
        with app.connection_for_write() as connection:
            connection.ensure_connection(max_retries=1, interval_start=0, timeout=2)
            connection.default_channel  # noqa: B018 (opens the channel: Redis answers, SQLite opens)
        return True
    except Exception as exc:
        log.warning("broker unreachable: %s", exc)
        return False


def workers_alive() -> bool:
    """True when at least one worker has sent a heartbeat within the TTL (for /readyz)."""
    try:
        return bool(live_workers(load_config()))
    except Exception as exc:
        log.warning("cannot read worker heartbeats: %s", exc)
        return False
