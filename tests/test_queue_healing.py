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
from pathlib import Path

import pytest

from tests.support.queue_harness import (
    REDIS_SERVER,
    RedisServer,
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

pytestmark = [
    pytest.mark.integration,
    pytest.mark.skipif(REDIS_SERVER is None, reason="needs redis-server"),
]


def pool_processes(worker: Worker) -> set[int]:
    """The pids of the worker's pool processes (the main process's children)."""
    assert worker.process is not None
    out = subprocess.run(["pgrep", "-P", str(worker.process.pid)], capture_output=True,
                         text=True, check=False).stdout.split()
    return {int(pid) for pid in out}


@pytest.fixture
def redis_server(tmp_path: Path):
    server = RedisServer(tmp_path / "redis")
    server.start()
    yield server
    server.stop()


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
