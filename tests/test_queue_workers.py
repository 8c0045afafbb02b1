"""Real Celery workers on a private Redis: batches, killed workers, crashing checks, time limits.

The reference for every verdict is ``service.runner.run_check_json`` run in a fresh process with
the workers' environment (``engine_verdicts``): the queue must hand back exactly what the engine
computes. The failure semantics tested are
Celery's documented late-acknowledgement behaviour (docs.celeryq.dev, configuration:
task_acks_late, task_reject_on_worker_lost, task_time_limit / task_soft_time_limit) and the
store's claim contract (workers/store/protocols.py).
"""

from __future__ import annotations

from pathlib import Path

import pytest

from tests.support.queue_harness import (
    REDIS_SERVER,
    RedisServer,
    Worker,
    all_final,
    engine_verdicts,
    statuses,
    stored_batch,
    submit,
    wait_until,
    worker_env,
)
from tests.support.queue_variants import variants
from workers.celery_app import make_app
from workers.runtime_config import CHECK_QUEUE, RUN_CHECK_TASK, load_config
from workers.store import open_stores

pytestmark = [
    pytest.mark.integration,
    pytest.mark.skipif(REDIS_SERVER is None, reason="needs redis-server"),
]

# Short limits for the failure tests: lease = hard + 5 s = 8 s (workers.runtime_config).
SHORT_LIMITS = {"BALLAST_SOFT_TIME_LIMIT_S": "2", "BALLAST_HARD_TIME_LIMIT_S": "3"}


@pytest.fixture
def store(redis_server: RedisServer):
    store = open_stores(redis_server.url).checks
    yield store
    store.close()


@pytest.fixture
def workers(tmp_path: Path):
    started: list[Worker] = []

    def start(env: dict[str, str], concurrency: int = 1, name: str = "w") -> Worker:
        worker = Worker(tmp_path, env, concurrency, name).start()
        started.append(worker)
        return worker

    yield start
    for worker in started:
        worker.stop()


def differences(got: object, want: object, path: str = "") -> list[str]:
    """Paths where two JSON values differ (for a readable failure message)."""
    if isinstance(got, dict) and isinstance(want, dict):
        return [d for k in sorted(set(got) | set(want))
                for d in differences(got.get(k), want.get(k), f"{path}.{k}")]
    if isinstance(got, list) and isinstance(want, list) and len(got) == len(want):
        return [d for i, (g, w) in enumerate(zip(got, want, strict=True))
                for d in differences(g, w, f"{path}[{i}]")]
    return [] if got == want else [f"{path}: {got!r} != {want!r}"]


def test_batch_of_200_variants_matches_the_engine(redis_server, store, workers, tmp_path):
    env = worker_env(redis_server.url, tmp_path)
    workers(env, concurrency=2)
    batch = variants(200, points=101)
    expected = engine_verdicts([v.request for v in batch], env)
    ids = submit(store, env, [(v.label, v.request) for v in batch])
    wait_until(lambda: all_final(store, ids), 300, "the batch to finish", every_s=0.5)
    assert statuses(store, ids) == {"done": 200}
    for check_id, variant, want in zip(ids, batch, expected, strict=True):
        record = store.get_check_any(check_id)
        assert record is not None and record.label == variant.label
        assert record.attempts == 1
        assert differences(record.verdict, want) == [], variant.label


def _holder(pool: list[Worker], check_id: str, store) -> Worker | None:
    """The worker whose log shows it received the task of ``check_id`` while it runs."""
    if store.get_check_any(check_id).status != "running":
        return None
    holders = [w for w in pool if "received" in w.log_text()]
    return holders[0] if len(holders) == 1 else None


@pytest.mark.parametrize("layout", ["redis", "embedded"])
def test_killed_worker_check_completes_on_another(layout, redis_server, workers, tmp_path):
    """Redis: kombu's restore or the reconciler brings the check back. Embedded SQLite broker:
    the killed worker's message is gone with it, so only the reconciler (lease expiry) can."""
    redis_url = redis_server.url if layout == "redis" else None
    env = worker_env(redis_url, tmp_path / "data", BALLAST_SOFT_TIME_LIMIT_S="5",
                     BALLAST_HARD_TIME_LIMIT_S="6", BALLAST_TEST_PAUSE_LABEL="slow",
                     BALLAST_TEST_PAUSE_S="3")
    store = open_stores(load_config(env).store_url).checks
    pool = [workers(env, name="first"), workers(env, name="second")]
    (variant,) = variants(1, points=101)
    (want,) = engine_verdicts([variant.request], env)
    (check_id,) = submit(store, env, [("slow", variant.request)])
    victim = wait_until(lambda: _holder(pool, check_id, store), 30, "a worker to start the check")
    victim.kill9()  # mid-check: the message is unacknowledged and the lease still runs
    survivor = next(w for w in pool if w is not victim)
    record = wait_until(
        lambda: (r := store.get_check_any(check_id)).status in ("done", "failed") and r, 60,
        "the check to finish on the other worker")
    store.close()
    assert record.status == "done", record.error
    assert record.attempts == 2
    assert differences(record.verdict, want) == []
    assert survivor.alive()
    # the store records the verdict before Celery logs the task's success: wait for the log line
    wait_until(lambda: "succeeded" in survivor.log_text(), 15, "the survivor to log the success")


def test_stored_but_unpublished_checks_are_delivered_by_the_reconciler(
        redis_server, store, workers, tmp_path):
    """The API stores checks, then publishes; if the publish fails they stay queued. With the
    broker queue empty, the reconciler publishes them (after stale_after_s = 10 s here)."""
    env = worker_env(redis_server.url, tmp_path)
    workers(env)
    batch = variants(3, points=101)
    expected = engine_verdicts([v.request for v in batch], env)
    ids = stored_batch(store, [(v.label, v.request) for v in batch])  # never published
    wait_until(lambda: all_final(store, ids), 60, "the reconciler to deliver them")
    for check_id, want in zip(ids, expected, strict=True):
        record = store.get_check_any(check_id)
        assert record.status == "done" and record.attempts == 1
        assert differences(record.verdict, want) == []


def test_check_that_kills_its_worker_every_time_fails_after_max_attempts(
        redis_server, store, workers, tmp_path):
    # Hard limit 60 s, so the lease is 66 s: the check must end well inside ONE lease, which it
    # can only do if each lost pool process released the lease for the redelivery to claim.
    env = worker_env(redis_server.url, tmp_path, BALLAST_SOFT_TIME_LIMIT_S="50",
                     BALLAST_HARD_TIME_LIMIT_S="60", BALLAST_MAX_ATTEMPTS="2",
                     BALLAST_TEST_CRASH_LABEL="poison")
    worker = workers(env)
    good, bad = variants(2, points=101)
    (want,) = engine_verdicts([good.request], env)
    ids = submit(store, env, [("poison", bad.request), ("fine", good.request)])
    wait_until(lambda: all_final(store, ids), 45, "both checks to end within one lease")
    poison, fine = (store.get_check_any(i) for i in ids)
    assert poison.status == "failed"
    assert poison.attempts == 2
    assert poison.error
    assert fine.status == "done"
    assert differences(fine.verdict, want) == []
    assert worker.alive()  # Celery replaced the pool process each time
    assert worker.log_text().count("WorkerLostError") >= 2


def test_soft_time_limit_fails_the_check_with_the_reason(redis_server, store, workers, tmp_path):
    env = worker_env(redis_server.url, tmp_path, **SHORT_LIMITS, BALLAST_TEST_PAUSE_LABEL="slow",
                     BALLAST_TEST_PAUSE_S="10")
    workers(env)
    (variant,) = variants(1, points=101)
    (check_id,) = submit(store, env, [("slow", variant.request)])
    record = wait_until(lambda: (r := store.get_check_any(check_id)).status == "failed" and r, 30,
                        "the time-out")
    assert "time limit" in record.error and "2 s" in record.error
    assert record.attempts == 1


def test_hard_time_limit_fails_the_check_with_the_reason(redis_server, store, workers, tmp_path):
    env = worker_env(redis_server.url, tmp_path, **SHORT_LIMITS, BALLAST_TEST_PAUSE_LABEL="stuck",
                     BALLAST_TEST_PAUSE_S="10", BALLAST_TEST_PAUSE_STUBBORN="1")
    worker = workers(env)
    (variant,) = variants(1, points=101)
    (check_id,) = submit(store, env, [("stuck", variant.request)])
    record = wait_until(lambda: (r := store.get_check_any(check_id)).status == "failed" and r, 30,
                        "the hard time-out")
    assert "hard limit" in record.error and "3 s" in record.error
    assert worker.alive()


def test_dead_worker_message_restored_by_kombu_within_seconds(
        redis_server, store, workers, tmp_path):
    """With the reconciler out of the way, the broker alone must bring the message back: the
    visibility timeout (lease + 5 s = 13 s here) plus the tuned 1 s restore interval, where stock
    kombu 5.6 checks only about every 100 s (workers/redis_transport.py)."""
    env = worker_env(redis_server.url, tmp_path, **SHORT_LIMITS, BALLAST_TEST_PAUSE_LABEL="slow",
                     BALLAST_TEST_PAUSE_S="1.5", BALLAST_RECONCILE_INTERVAL_S="3600")
    first = workers(env, name="first")
    (variant,) = variants(1, points=101)
    (check_id,) = submit(store, env, [("slow", variant.request)])
    wait_until(lambda: store.get_check_any(check_id).status == "running", 30, "the check to start")
    first.kill9()
    workers(env, name="second")
    record = wait_until(
        lambda: (r := store.get_check_any(check_id)).status == "done" and r, 45,
        "kombu to restore the unacknowledged message")
    assert record.attempts == 2


def test_redis_restart_loses_no_accepted_check(redis_server, store, workers, tmp_path):
    """Celery 5.7.0 workers were seen to exit ("Unrecoverable error … 'NoneType' object has no
    attribute 'hostname'") when Redis restarted under a late-acknowledged task; the pinned
    5.6.3 must reconnect and finish everything that was accepted."""
    env = worker_env(redis_server.url, tmp_path)
    worker = workers(env, concurrency=2)
    batch = variants(80, points=201)
    expected = engine_verdicts([v.request for v in batch], env)
    ids = submit(store, env, [(v.label, v.request) for v in batch])
    wait_until(lambda: sum(statuses(store, ids).get(s, 0) for s in ("done", "failed")) >= 5, 120,
               "the first checks")
    redis_server.restart(down_s=2.0)
    wait_until(lambda: all_final(store, ids), 240, "the batch to finish after the restart",
               every_s=0.5)
    assert statuses(store, ids) == {"done": 80}
    for check_id, variant, want in zip(ids, batch, expected, strict=True):
        got = store.get_check_any(check_id).verdict
        assert differences(got, want) == [], variant.label
    assert worker.alive(), worker.log_tail()
    assert "Unrecoverable error" not in worker.log_text()


def test_pickle_message_is_refused(redis_server, store, workers, tmp_path):
    """accept_content=["json"]: a pickled message is rejected unread (kombu ContentDisallowed)."""
    env = worker_env(redis_server.url, tmp_path)
    worker = workers(env)
    (variant,) = variants(1, points=101)
    (check_id,) = stored_batch(store, [("pickled", variant.request)])
    app = make_app(load_config(env))
    app.send_task(RUN_CHECK_TASK, args=[check_id], queue=CHECK_QUEUE, serializer="pickle")
    wait_until(lambda: "pickle" in worker.log_text(), 30, "the worker to refuse the message")
    record = store.get_check_any(check_id)
    assert record.status == "queued" and record.attempts == 0
    app.close()
