"""The reconciler against the real SQLite store, with a controlled clock and a recording publisher.

What it must do follows from the store contract (workers/store/protocols.py) and from Celery's
late-acknowledgement semantics (docs.celeryq.dev, "Should I use retry or acks_late?"): a check
whose lease ran out is handed out again, and a check that sat queued while the broker's queue was
empty was never delivered.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from workers.reconciler import Reconciler
from workers.runtime_config import load_config
from workers.store import NewCheck
from workers.store.sqlite_backend import SqliteCheckStore


class Clock:
    def __init__(self, now: float = 1_000_000.0) -> None:
        self.now = now

    def __call__(self) -> float:
        return self.now


@pytest.fixture
def setup(tmp_path: Path):
    config = load_config({"BALLAST_DATA_DIR": str(tmp_path), "BALLAST_SOFT_TIME_LIMIT_S": "10",
                          "BALLAST_HARD_TIME_LIMIT_S": "20", "BALLAST_RECONCILE_INTERVAL_S": "1"})
    clock = Clock()
    store = SqliteCheckStore(tmp_path / "store.sqlite3", clock=clock)
    published: list[list[str]] = []
    queue_size = {"n": 0}
    reconciler = Reconciler(config, store, lambda ids, **route: published.append(ids),
                            lambda tenant: queue_size["n"], stale_after_s=30.0)
    new = [NewCheck(b"request %d" % i, "test/opaque", f"c{i}") for i in range(3)]
    _, ids = store.create_checks("t", new, as_batch=True)
    yield config, clock, store, published, queue_size, reconciler, ids
    store.close()


def test_expired_lease_is_requeued_once_per_lease(setup):
    config, clock, store, published, _, reconciler, ids = setup
    assert store.claim(ids[0], config.lease_s, config.max_attempts) is not None
    clock.now += config.lease_s - 1
    assert reconciler.tick(clock.now).expired == ()  # lease still running: leave it
    clock.now += 2
    assert reconciler.tick(clock.now).expired == (ids[0],)
    clock.now += 1
    assert reconciler.tick(clock.now).expired == ()  # back-off: not again within one lease
    clock.now += config.lease_s
    assert reconciler.tick(clock.now).expired == (ids[0],)
    assert [ids[0]] in published


def test_requeued_expired_check_is_claimed_again_and_counts_the_attempt(setup):
    config, clock, store, _, _, reconciler, ids = setup
    store.claim(ids[0], config.lease_s, config.max_attempts)
    clock.now += config.lease_s + 1
    reconciler.tick(clock.now)
    record = store.claim(ids[0], config.lease_s, config.max_attempts)
    assert record is not None and record.attempts == 2


def test_queued_checks_requeued_only_when_broker_queue_is_empty(setup):
    _, clock, _, published, queue_size, reconciler, ids = setup
    clock.now += 31  # older than stale_after_s
    queue_size["n"] = 5  # messages still waiting: those checks are presumably in the queue
    assert reconciler.tick(clock.now).undelivered == ()
    queue_size["n"] = 0
    assert sorted(reconciler.tick(clock.now).undelivered) == sorted(ids)
    assert sorted(published[-1]) == sorted(ids)
    # touch_queued restarted their clocks: not re-queued again before stale_after_s
    clock.now += 10
    assert reconciler.tick(clock.now).undelivered == ()
    clock.now += 25
    assert sorted(reconciler.tick(clock.now).undelivered) == sorted(ids)


def test_young_queued_checks_are_left_alone(setup):
    _, clock, _, published, _, reconciler, _ = setup
    clock.now += 5
    assert reconciler.tick(clock.now).undelivered == ()
    assert published == []


def test_final_checks_are_never_requeued(setup):
    config, clock, store, published, _, reconciler, ids = setup
    store.claim(ids[0], config.lease_s, config.max_attempts)
    store.complete(ids[0], {"verdict": "stable", "unstable_count": 0, "modes": []})
    store.fail(ids[1], "test")
    store.cancel_check("t", ids[2])
    clock.now += 10 * config.lease_s
    report = reconciler.tick(clock.now)
    assert report.expired == () and report.undelivered == ()
    assert published == []


def test_only_one_reconciler_runs_a_pass_at_a_time(setup):
    config, clock, store, _, _, reconciler, _ = setup
    other = Reconciler(config, store, lambda ids, **route: None, lambda tenant: 0,
                       owner="other")
    assert other._lock.acquire("other")  # another process in the middle of its pass
    try:
        assert reconciler.tick(clock.now).skipped_not_leader
    finally:
        other._lock.release()
    assert not reconciler.tick(clock.now).skipped_not_leader


def test_running_checks_of_a_worker_without_heartbeat_are_handed_on(setup):
    """A worker whose main process died stops beating: its running checks are released and
    re-queued on the next pass, long before their lease ends (issue 10, workers that heal)."""
    config, clock, store, _, _, _, ids = setup
    routed: list[tuple[list[str], dict]] = []
    reconciler = Reconciler(config, store, lambda got, **route: routed.append((got, route)),
                            lambda tenant: 0, stale_after_s=30.0,
                            live_workers=lambda: ["alive@host#41", "restarted@host#77"])
    store.claim(ids[0], config.lease_s, config.max_attempts, worker="gone@host#12")
    store.claim(ids[1], config.lease_s, config.max_attempts, worker="alive@host#41")
    # the same name, restarted (systemd): the instance that claimed it is gone
    store.claim(ids[2], config.lease_s, config.max_attempts, worker="restarted@host#76")
    clock.now += 1  # well inside the lease
    report = reconciler.tick(clock.now)
    assert report.orphaned == tuple(sorted([ids[0], ids[2]]))
    assert routed == [(sorted([ids[0], ids[2]]), {"tenant": "t", "priority": "normal"})]
    again = store.claim(ids[0], config.lease_s, config.max_attempts, worker="alive@host#41")
    assert again is not None and again.attempts == 2
    assert store.claim(ids[1], config.lease_s, config.max_attempts) is None  # still running
    later = reconciler.tick(clock.now + 1)
    assert later.orphaned == (ids[2],)  # still not claimed again by anyone
    assert later.expired == () and len(routed) == 1  # but not queued twice within a lease


def test_no_worker_is_judged_dead_when_no_heartbeat_can_be_read(setup):
    config, clock, store, _, _, _, ids = setup
    reconciler = Reconciler(config, store, lambda got, **route: None, lambda tenant: 0,
                            live_workers=lambda: [])
    store.claim(ids[0], config.lease_s, config.max_attempts, worker="w@host")
    assert reconciler.tick(clock.now + 1).orphaned == ()


def test_undelivered_checks_are_requeued_per_tenant_whose_queue_is_empty(setup):
    config, clock, store, *_ = setup
    _, other = store.create_checks("u", [NewCheck(b"x", "test/opaque", "u0")])
    routed: list[tuple[list[str], dict]] = []
    sizes = {"t": 4, "u": 0}  # t's messages are still waiting; u's queue is empty
    reconciler = Reconciler(config, store, lambda got, **route: routed.append((got, route)),
                            lambda tenant: sizes[tenant], stale_after_s=30.0)
    clock.now += 31
    assert reconciler.tick(clock.now).undelivered == tuple(other)
    assert routed == [(other, {"tenant": "u", "priority": "normal"})]
