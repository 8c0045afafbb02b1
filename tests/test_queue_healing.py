"""Workers that heal: a pool process killed with ``kill -9`` is replaced and the work goes on; a
worker whose main process dies has its running checks re-queued by heartbeat, well inside one
lease.

Real Celery workers on a private redis-server or on the embedded SQLite broker
(``tests.support.queue_harness``). The reference verdicts are the engine's own
(``engine_verdicts``). What is expected follows Celery's documented prefork behaviour (a lost
pool process is replaced; with ``task_reject_on_worker_lost`` its message is delivered again) and
the store's contract (``workers/store/protocols.py``: ``release`` ends a lease now).
"""

from __future__ import annotations

import os
import signal
import subprocess
import time

import pytest

from tests.support.queue_harness import (
    QUEUE_TEST_MARKS,
    Worker,
    all_final,
    engine_verdicts,
    statuses,
    submit,
    wait_until,
    worker_env,
)
from tests.support.queue_variants import variants
from workers.runtime_config import load_config
from workers.store import open_stores

pytestmark = QUEUE_TEST_MARKS


def pool_processes(worker: Worker) -> set[int]:
    """The pids of the worker's pool processes (the main process's children)."""
    assert worker.process is not None
    out = subprocess.run(["pgrep", "-P", str(worker.process.pid)], capture_output=True,
                         text=True, check=False).stdout.split()
    return {int(pid) for pid in out}


@pytest.mark.parametrize("layout", ["redis", "embedded"])
def test_pool_refills_after_its_processes_are_killed(layout, redis_server, tmp_path):
    """Every pool process is killed twice while a batch runs (one of them idle, waiting for a
    job): each time two new ones take their place, and the batch ends with every verdict the
    engine's."""
    env = worker_env(redis_server.url if layout == "redis" else None, tmp_path / "data")
    store = open_stores(load_config(env).store_url).checks
    worker = Worker(tmp_path, env, concurrency=2).start()
    try:
        batch = variants(60, points=201)
        expected = engine_verdicts([v.request for v in batch], env)
        ids = submit(store, env, [(v.label, v.request) for v in batch])
        for _ in range(2):
            victims = wait_until(lambda: p if len(p := pool_processes(worker)) == 2 else None,
                                 30, "two pool processes")
            for pid in victims:
                os.kill(pid, signal.SIGKILL)
            wait_until(lambda gone=victims: len(pool_processes(worker) - gone) == 2, 30,
                       "two new pool processes")
            time.sleep(1.0)
        wait_until(lambda: all_final(store, ids), 240, "the batch to finish", every_s=0.5)
        assert statuses(store, ids) == {"done": len(ids)}, worker.log_tail()
        for check_id, want in zip(ids, expected, strict=True):
            assert store.get_check_any(check_id).verdict == want
        assert len(pool_processes(worker)) == 2
    finally:
        worker.stop()
        store.close()


@pytest.mark.parametrize("layout", ["redis", "embedded"])
def test_check_of_a_dead_main_process_runs_again_by_heartbeat(layout, redis_server, tmp_path):
    """The main process of the worker running a check is killed (its pool process is left
    running, orphaned). With a hard limit of 60 s the lease is 66 s; the heartbeat TTL is 3 s and
    the reconciler runs every second, so the check must run again on the other worker and finish
    well inside one lease (here: within 30 s of the kill)."""
    env = worker_env(redis_server.url if layout == "redis" else None, tmp_path / "data",
                     BALLAST_TEST_PAUSE_LABEL="slow", BALLAST_TEST_PAUSE_S="45")
    store = open_stores(load_config(env).store_url).checks
    first = Worker(tmp_path, env, name="first").start()
    second: Worker | None = None
    try:
        (variant,) = variants(1, points=101)
        (want,) = engine_verdicts([variant.request], env)
        (check_id,) = submit(store, env, [("slow", variant.request)])
        wait_until(lambda: store.get_check_any(check_id).status == "running", 30,
                   "the first worker to start the check")
        assert store.get_check_any(check_id).worker == f"first@test#{first.process.pid}"
        second = Worker(tmp_path, {**env, "BALLAST_TEST_PAUSE_LABEL": "none"},
                        name="second").start()
        first.kill9_main()
        killed_at = time.monotonic()
        record = wait_until(
            lambda: (r := store.get_check_any(check_id)).status in ("done", "failed") and r,
            30, "the check to finish on the other worker")
        assert time.monotonic() - killed_at < load_config(env).lease_s / 2
        assert record.status == "done", record.error
        assert record.attempts == 2
        assert record.worker == f"second@test#{second.process.pid}"
        assert record.verdict == want
    finally:
        first.stop()
        if second is not None:
            second.stop()
        store.close()
