"""The access store's contract, run against both back ends (SQLite file and a real Redis server):
idempotency keys as in the IETF draft "The Idempotency-Key HTTP Header Field" (a key is bound to
one body; a retry with it gets the first answer), API tokens kept as digests, fixed-window rates.
"""

from __future__ import annotations

import pytest

from tests.conftest import sqlite_stores


def test_idempotency_key_states(access):
    assert access.idempotency_begin("acme", "k1", "h1", 30) == ("new", None)
    assert access.idempotency_begin("acme", "k1", "h1", 30) == ("pending", None)
    assert access.idempotency_begin("acme", "k1", "h2", 30) == ("mismatch", None)
    assert access.idempotency_begin("other", "k1", "h2", 30) == ("new", None)  # per tenant
    access.idempotency_finish("acme", "k1", "chk_1")
    assert access.idempotency_begin("acme", "k1", "h1", 30) == ("done", "chk_1")
    assert access.idempotency_begin("acme", "k1", "h2", 30) == ("mismatch", None)
    access.idempotency_begin("acme", "k2", "h1", 30)
    access.idempotency_release("acme", "k2")
    assert access.idempotency_begin("acme", "k2", "h9", 30) == ("new", None)


def test_a_pending_key_expires(access, clock):
    assert access.idempotency_begin("acme", "k1", "h1", 30) == ("new", None)
    if hasattr(access, "r"):  # Redis: the key itself expires (PEXPIRE with the pending time)
        assert 0 < access.r.pttl(access._idem_key("acme", "k1")) <= 30_000
        return
    clock.now += 31
    assert access.idempotency_begin("acme", "k1", "h2", 30) == ("new", None)


def test_sqlite_purge_drops_expired_keys_only(tmp_path, clock):
    access = sqlite_stores(tmp_path / "s.sqlite3", clock, retention_s=3600).access
    access.idempotency_begin("acme", "pending", "h1", 30)
    access.idempotency_begin("acme", "done", "h1", 30)
    access.idempotency_finish("acme", "done", "chk_1")  # kept for the retention
    clock.now += 60
    assert access.purge(clock.now) == 1
    assert access.idempotency_begin("acme", "done", "h1", 30) == ("done", "chk_1")


def test_tokens_and_rate(access, clock):
    access.put_token("ab" * 32, "acme")
    assert access.tenant_for_token("ab" * 32) == "acme"
    assert access.get_token("ab" * 32).tenant == "acme"
    assert [t.tenant for t in access.list_tokens()] == ["acme"]
    assert access.revoke_token("ab" * 32) is True
    assert access.tenant_for_token("ab" * 32) is None and access.get_token("ab" * 32) is None
    assert access.revoke_token("ab" * 32) is False
    clock.now = 6000.0  # the start of a 60 s window
    assert [access.hit_rate("acme", 60, 3) for _ in range(3)] == [0.0, 0.0, 0.0]
    clock.now += 20
    assert access.hit_rate("acme", 60, 3) == pytest.approx(40.0)
    assert access.hit_rate("other", 60, 3) == 0.0
    clock.now += 40
    assert access.hit_rate("acme", 60, 3) == 0.0  # a new window


def test_both_stores_share_one_connection_and_answer_pings(stores):
    assert stores.checks.ping() and stores.access.ping()
    if hasattr(stores.checks, "r"):
        assert stores.checks.r is stores.access.r
    else:
        assert stores.checks.db is stores.access.db
