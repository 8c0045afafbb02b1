"""What the stores keep for scheduling, healing and callbacks, on both back ends: priorities and
the per-tenant urgent bound, routes and tenants for the queues per tenant, the worker holding a
running check, checks counted per rate window, webhook secrets with a rotation grace, and batch
callbacks that become due once the batch has finished.

The expected behaviour is the contract of issue 10 and ``workers/store/protocols.py``.
"""

from __future__ import annotations

import pytest

from workers.store import (
    NewCheck,
    QuotaExceededError,
    Route,
    Submission,
    UrgentQuotaExceededError,
)

URGENT = Submission(priority="urgent", request_id="req_test1")


def _checks(n: int) -> list[NewCheck]:
    return [NewCheck(b"request %d" % i, "test/opaque", f"c{i}") for i in range(n)]


def test_urgent_checks_are_bounded_per_tenant(checks):
    _, first = checks.create_checks("acme", _checks(2), submission=URGENT, max_urgent=3)
    with pytest.raises(UrgentQuotaExceededError) as caught:
        checks.create_checks("acme", _checks(2), submission=URGENT, max_urgent=3)
    assert caught.value.limit == 3 and caught.value.unfinished == 2
    assert isinstance(caught.value, QuotaExceededError)
    # normal checks and other tenants are not held by acme's urgent bound
    checks.create_checks("acme", _checks(5), max_urgent=3)
    checks.create_checks("rival", _checks(3), submission=URGENT, max_urgent=3)
    checks.cancel_check("acme", first[0])  # a finished urgent check frees its place
    checks.create_checks("acme", _checks(2), submission=URGENT, max_urgent=3)
    assert checks.count_unfinished("acme") == 2 + 5 + 2 - 1


def test_routes_tenants_and_records_carry_the_submission(checks):
    _, (urgent,) = checks.create_checks("acme", _checks(1), submission=URGENT)
    _, (normal,) = checks.create_checks("rival", _checks(1))
    assert checks.routes([urgent, normal, "chk_unknown"]) == {
        urgent: Route("acme", "urgent"), normal: Route("rival", "normal")}
    assert set(checks.tenants()) >= {"acme", "rival"}
    record = checks.get_check("acme", urgent)
    assert record.priority == "urgent" and record.request_id == "req_test1"
    assert checks.get_check("rival", normal).priority == "normal"


def test_a_claim_records_the_worker(checks):
    _, (a, b) = checks.create_checks("acme", _checks(2))
    assert checks.claim(a, 60, 3, worker="w1@host").worker == "w1@host"
    checks.claim(b, 60, 3)
    assert checks.running_workers() == {a: "w1@host", b: None}
    checks.complete(a, {"verdict": "stable", "unstable_count": 0, "modes": []})
    assert checks.running_workers() == {b: None}


def test_checks_are_counted_per_window(access, clock):
    clock.now = 6000.0  # the start of a 60 s window
    assert access.count_checks("acme", 60, 8, 5) == 0.0
    assert access.count_checks("acme", 60, 8, 4) == pytest.approx(60.0)  # 9 > 8: nothing counted
    assert access.count_checks("acme", 60, 8, 3) == 0.0  # exactly 8
    assert access.count_checks("rival", 60, 8, 8) == 0.0
    assert access.count_checks("acme", 60, 8, -3) == 0.0  # a failed submission gives them back
    assert access.count_checks("acme", 60, 8, 3) == 0.0
    clock.now += 60
    assert access.count_checks("acme", 60, 8, 8) == 0.0  # a new window


def test_webhook_secret_rotation_keeps_the_old_one_for_the_grace(access, clock):
    assert access.webhook_secrets("acme", clock.now) == ()
    access.put_webhook_secret("acme", "whsec_one", clock.now, 3600)
    assert access.webhook_secrets("acme", clock.now) == ("whsec_one",)
    access.put_webhook_secret("acme", "whsec_two", clock.now, 3600)
    assert access.webhook_secrets("acme", clock.now + 10) == ("whsec_two", "whsec_one")
    assert access.webhook_secrets("acme", clock.now + 3601) == ("whsec_two",)
    assert access.webhook_secrets("rival", clock.now) == ()


def test_a_batch_callback_is_due_once_the_batch_has_finished(checks, clock):
    hook = Submission(callback_url="https://hooks.example/ballast")
    batch_id, (a, b) = checks.create_checks("acme", _checks(2), as_batch=True, submission=hook)
    assert checks.get_batch("acme", batch_id).callback_status == "waiting"
    checks.claim(a, 60, 3)
    checks.complete(a, {"verdict": "stable", "unstable_count": 0, "modes": []})
    clock.now += 5
    assert checks.due_callbacks(clock.now, lease_s=30) == []  # b is still queued
    checks.cancel_check("acme", b)
    clock.now += 5
    (due,) = checks.due_callbacks(clock.now, lease_s=30)
    assert (due.batch_id, due.tenant, due.url, due.attempts) == (
        batch_id, "acme", "https://hooks.example/ballast", 0)
    assert checks.due_callbacks(clock.now + 1, lease_s=30) == []  # held by its sender
    checks.callback_result(batch_id, delivered=False, attempts=1, next_at=clock.now + 10,
                           error="HTTP 503")
    assert checks.due_callbacks(clock.now + 5, lease_s=30) == []
    (again,) = checks.due_callbacks(clock.now + 11, lease_s=30)
    assert again.attempts == 1
    checks.callback_result(batch_id, delivered=True, attempts=2, next_at=None)
    assert checks.due_callbacks(clock.now + 100, lease_s=30) == []
    assert checks.get_batch("acme", batch_id).callback_status == "delivered"
