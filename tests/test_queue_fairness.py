"""Fair sharing between tenants with a real worker, on Redis and on the embedded SQLite broker.

A worker with one pool process (prefetch 1, late acknowledgement) takes the tenants' queues in
turn (kombu's round-robin queue order: docs.celeryq.dev, "Redis transport options,
queue_order_strategy"; kombu's ``FairCycle`` on virtual transports), and urgent messages before
normal ones. So a check that a tenant sends behind another tenant's hundreds waits for the check
running and the one reserved, not for the backlog; cancelling takes the backlog out of the queue.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from tests.support.queue_harness import (
    QUEUE_TEST_MARKS,
    RedisServer,
    Worker,
    all_final,
    submit,
    wait_until,
    worker_env,
)
from tests.support.queue_variants import variants
from workers.celery_app import make_app
from workers.queue import queue_size, withdraw
from workers.runtime_config import load_config
from workers.store import open_stores

pytestmark = QUEUE_TEST_MARKS

BACKLOG = 150
# What may run between a check's submission and its start: the backlog's check running, the one
# the pool process has reserved (prefetch 1), and one more taken in the same round-robin turn.
FEW = 4


@pytest.fixture(params=["redis", "embedded"])
def setup(request: pytest.FixtureRequest, tmp_path: Path):
    server = None
    if request.param == "redis":
        server = RedisServer(tmp_path / "redis")
        server.start()
    env = worker_env(server.url if server else None, tmp_path / "data")
    store = open_stores(load_config(env).store_url).checks
    app = make_app(load_config(env))
    worker = Worker(tmp_path, env, concurrency=1).start()
    try:
        # each tenant's queue is known to the worker before the measurement starts
        warm = submit(store, env, [("warm", variants(1, points=51)[0].request)], tenant="small")
        warm += submit(store, env, [("warm", variants(1, points=51)[0].request)], tenant="big")
        wait_until(lambda: all_final(store, warm), 60, "the first checks of both tenants")
        yield env, store, app
    finally:
        worker.stop()
        app.close()
        store.close()
        if server is not None:
            server.stop()


def _done_among(store, ids: list[str]) -> int:
    return sum(1 for i in ids if store.get_check_any(i).status == "done")


def _started_after(store, backlog: list[str], check_id: str) -> int:
    """How many backlog checks started after ``check_id`` was stored and before it started."""
    mine = store.get_check_any(check_id)
    return sum(1 for i in backlog
               if (r := store.get_check_any(i)).started_at is not None
               and mine.created_at <= r.started_at <= mine.started_at)


def test_another_tenants_check_waits_for_a_few_checks_not_the_backlog(setup):
    env, store, _ = setup
    batch = variants(BACKLOG, points=201)
    backlog = submit(store, env, [(v.label, v.request) for v in batch], tenant="big")
    wait_until(lambda: _done_among(store, backlog) >= 3, 60, "the backlog to start")
    (mine,) = submit(store, env, [("mine", batch[0].request)], tenant="small")
    wait_until(lambda: store.get_check_any(mine).status == "done", 60, "the small tenant's check")
    assert _started_after(store, backlog, mine) <= FEW
    assert _done_among(store, backlog) < BACKLOG / 2  # the backlog was far from done


def test_urgent_check_goes_before_its_own_tenants_backlog(setup):
    env, store, _ = setup
    batch = variants(BACKLOG, points=201)
    backlog = submit(store, env, [(v.label, v.request) for v in batch], tenant="big")
    wait_until(lambda: _done_among(store, backlog) >= 3, 60, "the backlog to start")
    (urgent,) = submit(store, env, [("urgent", batch[0].request)], tenant="big",
                       priority="urgent")
    wait_until(lambda: store.get_check_any(urgent).status == "done", 60, "the urgent check")
    assert _started_after(store, backlog, urgent) <= FEW
    assert _done_among(store, backlog) < BACKLOG / 2


def test_cancelled_backlog_leaves_the_queue_at_once(setup):
    env, store, app = setup
    batch = variants(BACKLOG, points=201)
    backlog = submit(store, env, [(v.label, v.request) for v in batch], tenant="big")
    record = store.get_check_any(backlog[0])
    wait_until(lambda: _done_among(store, backlog) >= 1, 60, "the backlog to start")
    cancelled = store.cancel_batch("big", record.batch_id).counts_by_status["cancelled"]
    removed = withdraw("big", backlog, app)
    assert queue_size("big", app) == 0
    # all but the few the worker took (and skipped as cancelled) between the two calls
    assert cancelled / 2 < removed <= cancelled
    (mine,) = submit(store, env, [("after", batch[0].request)], tenant="big")
    wait_until(lambda: store.get_check_any(mine).status == "done", 30, "the next check")
    assert _started_after(store, backlog, mine) <= 2
