"""The store's contract, run against both back ends (SQLite file and a real Redis server).

The expected behaviour comes from the service issue (states queued → running → done|failed|
cancelled by compare-and-set, attempts capped, per-tenant isolation, retention, idempotency keys
as in the IETF draft "The Idempotency-Key HTTP Header Field"), not from the implementation.
"""

from __future__ import annotations

import json
import subprocess
import sys
import threading

import pytest

from service.store.base import (
    NewCheck,
    QuotaExceededError,
    content_hash,
    merge_request,
    summarize_verdict,
)
from service.store.sqlite_store import SqliteStore

SHARED_MAP = {
    "ports": [{"name": "in", "role": "external"}, {"name": "out", "role": "external"}],
    "devices": [],
}


def _variant(i: int) -> dict:
    return {"frequency_hz": [1.0, 2.0, 3.0 + i], "parameters": "S",
            "data": {"re": [[[0.1 * i]]], "im": [[[0.0]]]}}


def _verdict(name: str, modes: list[dict] | None = None) -> dict:
    modes = modes or []
    return {"verdict": name, "unstable_count": 2 * len(modes) if name != "indeterminate" else None,
            "modes": modes, "diagnostics": []}


def test_create_and_read_single_check(store):
    _, (cid,) = store.create_checks("acme", [NewCheck({"a": [1, 2.5], "b": "x"})])
    record = store.get_check("acme", cid)
    assert record.status == "queued" and record.attempts == 0 and record.batch_id is None
    assert store.get_request(cid) == {"a": [1, 2.5], "b": "x"}
    # another tenant cannot see it (the API answers 404)
    assert store.get_check("other", cid) is None
    assert store.get_check("acme", "chk_does-not-exist") is None
    assert store.count_unfinished("acme") == 1 and store.count_unfinished("other") == 0


def test_ids_are_long_and_distinct(store):
    _, ids = store.create_checks("acme", [NewCheck({"i": i}) for i in range(50)])
    assert len(set(ids)) == 50
    # 16 random bytes → 22 base64url characters after the prefix (secrets.token_urlsafe)
    assert all(len(i) == len("chk_") + 22 for i in ids)


def test_batch_shared_map_is_stored_once_and_merged(store):
    variants = [NewCheck(_variant(i), label=f"v{i}") for i in range(3)]
    batch_id, ids = store.create_checks(
        "acme", variants, as_batch=True, batch_label="sweep", shared=SHARED_MAP)
    assert batch_id is not None and len(ids) == 3
    for i, cid in enumerate(ids):
        assert store.get_request(cid) == merge_request(SHARED_MAP, _variant(i))
        assert store.get_check("acme", cid).label == f"v{i}"
    store.create_checks("acme", variants, as_batch=True, shared=SHARED_MAP)
    digest = content_hash(SHARED_MAP)
    if isinstance(store, SqliteStore):
        rows = store._conn().execute("SELECT hash FROM blobs").fetchall()
        assert [r[0] for r in rows] == [digest]
    else:
        assert list(store.r.scan_iter(match=f"{store.p}blob:*")) == [f"{store.p}blob:{digest}"]
    batch = store.get_batch("acme", batch_id)
    assert batch.check_ids == tuple(ids) and batch.label == "sweep"
    assert batch.counts_by_status == {"queued": 3} and batch.counts_by_verdict == {}
    assert store.get_batch("other", batch_id) is None


def test_claim_complete_cycle_and_compare_and_set(store, clock):
    _, (cid,) = store.create_checks("acme", [NewCheck({"x": 1})])
    claimed = store.claim(cid, lease_s=60, max_attempts=3)
    assert claimed.status == "running" and claimed.attempts == 1
    assert claimed.lease_expires_at == pytest.approx(clock.now + 60)
    assert store.claim(cid, lease_s=60, max_attempts=3) is None  # lease still held
    assert store.count_unfinished("acme") == 1
    verdict = _verdict("unstable", [{"frequency_hz": 2.5e9, "nodes": ["g1", "d1"],
                                     "devices": ["Q1"]}])
    assert store.complete(cid, verdict) is True
    done = store.get_check("acme", cid)
    assert done.status == "done" and done.verdict == verdict and done.finished_at == clock.now
    assert store.count_unfinished("acme") == 0
    # a final state never changes again
    assert store.complete(cid, _verdict("stable")) is False
    assert store.fail(cid, "late") is False
    assert store.cancel_check("acme", cid).status == "done"
    assert store.claim(cid, lease_s=60, max_attempts=3) is None
    assert store.get_check("acme", cid).verdict == verdict


def test_complete_needs_running(store):
    _, (cid,) = store.create_checks("acme", [NewCheck({"x": 1})])
    assert store.complete(cid, _verdict("stable")) is False
    assert store.get_check("acme", cid).status == "queued"


def test_expired_lease_is_claimable_again_and_attempts_are_capped(store, clock):
    _, (cid,) = store.create_checks("acme", [NewCheck({"x": 1})])
    assert store.claim(cid, lease_s=10, max_attempts=2).attempts == 1
    clock.now += 5
    assert store.expired_leases(clock.now) == []
    clock.now += 10
    assert store.expired_leases(clock.now) == [cid]
    assert store.claim(cid, lease_s=10, max_attempts=2).attempts == 2
    clock.now += 11
    assert store.claim(cid, lease_s=10, max_attempts=2) is None  # attempts used up → failed
    failed = store.get_check("acme", cid)
    assert failed.status == "failed" and "2 attempts" in failed.error
    assert store.expired_leases(clock.now) == []


def test_released_lease_is_claimable_at_once_and_attempts_still_count(store, clock):
    """A worker process that died gives its check back: the next delivery claims it without
    waiting for the lease, and the attempts cap still ends a check that kills every worker."""
    _, (cid,) = store.create_checks("acme", [NewCheck({"x": 1})])
    assert store.release(cid) is False  # queued: nothing to release
    assert store.claim(cid, lease_s=600, max_attempts=2).attempts == 1
    assert store.release(cid) is True
    assert store.expired_leases(clock.now) == [cid]  # the reconciler sees it too
    assert store.claim(cid, lease_s=600, max_attempts=2).attempts == 2  # same instant
    assert store.release(cid) is True
    assert store.claim(cid, lease_s=600, max_attempts=2) is None  # attempts used up → failed
    assert store.get_check("acme", cid).status == "failed"
    assert store.release(cid) is False  # final states keep no lease


def test_fail_records_reason(store):
    _, (cid,) = store.create_checks("acme", [NewCheck({"x": 1})])
    store.claim(cid, lease_s=60, max_attempts=3)
    assert store.fail(cid, "hard time limit (300 s) exceeded") is True
    record = store.get_check("acme", cid)
    assert record.status == "failed" and record.error == "hard time limit (300 s) exceeded"


def test_only_one_of_many_concurrent_claims_wins(store):
    _, (cid,) = store.create_checks("acme", [NewCheck({"x": 1})])
    results: list[object] = []
    barrier = threading.Barrier(8)

    def claim() -> None:
        barrier.wait()
        results.append(store.claim(cid, lease_s=60, max_attempts=5))

    threads = [threading.Thread(target=claim) for _ in range(8)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert sum(r is not None for r in results) == 1
    assert store.get_check("acme", cid).attempts == 1


def test_cancel_check_and_batch(store):
    batch_id, ids = store.create_checks(
        "acme", [NewCheck({"i": i}) for i in range(4)], as_batch=True)
    store.claim(ids[0], lease_s=60, max_attempts=3)
    store.complete(ids[0], _verdict("stable"))
    store.claim(ids[1], lease_s=60, max_attempts=3)
    assert store.cancel_check("other", ids[2]) is None
    assert store.get_check("acme", ids[2]).status == "queued"
    batch = store.cancel_batch("acme", batch_id)
    assert batch.counts_by_status == {"done": 1, "cancelled": 3}
    assert batch.counts_by_verdict == {"stable": 1}
    assert store.complete(ids[1], _verdict("stable")) is False  # the running one was cancelled
    assert store.cancel_batch("other", batch_id) is None
    assert store.count_unfinished("acme") == 0


def test_batch_counts_follow_every_transition(store):
    batch_id, ids = store.create_checks(
        "acme", [NewCheck({"i": i}) for i in range(5)], as_batch=True)
    for cid, name in zip(ids[:3], ["stable", "unstable", "unstable"], strict=True):
        store.claim(cid, lease_s=60, max_attempts=3)
        store.complete(cid, _verdict(name))
    store.claim(ids[3], lease_s=60, max_attempts=3)
    batch = store.get_batch("acme", batch_id)
    assert batch.counts_by_status == {"done": 3, "running": 1, "queued": 1}
    assert batch.counts_by_verdict == {"stable": 1, "unstable": 2}


def test_listing_pages_and_filters(store):
    n = 25
    batch_id, ids = store.create_checks(
        "acme", [NewCheck({"i": i}, label=f"v{i}") for i in range(n)], as_batch=True)
    unstable_mode = {"frequency_hz": 3e9, "nodes": ["d1"], "devices": ["Q1"]}
    low_mode = {"frequency_hz": 1e9, "nodes": ["g2", "d2"], "devices": ["Q2"]}
    for i in range(0, n, 3):
        store.claim(ids[i], lease_s=60, max_attempts=3)
        store.complete(ids[i], _verdict("unstable", [unstable_mode, low_mode]))
    seen: list[str] = []
    cursor = None
    pages = 0
    while True:
        page, cursor = store.list_batch_checks("acme", batch_id, after=cursor, limit=10)
        seen += [r.id for r in page]
        pages += 1
        if cursor is None:
            break
    assert seen == ids and pages == 3
    unstable, cursor = store.list_batch_checks(
        "acme", batch_id, after=None, limit=100, verdict="unstable")
    assert [r.id for r in unstable] == ids[0:n:3] and cursor is None
    summary = unstable[0].summary
    # the first offending mode is the lowest in frequency; its first node is the strongest
    assert (summary.verdict, summary.unstable_count) == ("unstable", 4)
    assert (summary.first_frequency_hz, summary.first_node) == (1e9, "g2")
    queued, _ = store.list_batch_checks("acme", batch_id, after=None, limit=100, status="queued")
    assert len(queued) == n - len(ids[0:n:3]) and all(r.status == "queued" for r in queued)
    assert store.list_batch_checks("other", batch_id, after=None, limit=10) == ([], None)
    # a filtered page with exactly `limit` matches left has no next cursor
    page, cursor = store.list_batch_checks(
        "acme", batch_id, after=None, limit=len(ids[0:n:3]), verdict="unstable")
    assert len(page) == len(ids[0:n:3]) and cursor is None


def test_list_batches_most_recent_first(store, clock):
    first, _ = store.create_checks("acme", [NewCheck({"i": 0})], as_batch=True, batch_label="a")
    clock.now += 1
    second, _ = store.create_checks("acme", [NewCheck({"i": 1})], as_batch=True, batch_label="b")
    store.create_checks("other", [NewCheck({"i": 2})], as_batch=True)
    batches = store.list_batches("acme")
    assert [b.id for b in batches] == [second, first]
    assert batches[0].counts_by_status == {"queued": 1}
    assert [b.id for b in store.list_batches("acme", limit=1)] == [second]


def test_queued_ids_and_touch(store, clock):
    _, ids = store.create_checks("acme", [NewCheck({"i": i}) for i in range(3)])
    assert store.queued_ids(clock.now) == []
    clock.now += 30
    assert sorted(store.queued_ids(clock.now)) == sorted(ids)
    store.claim(ids[0], lease_s=60, max_attempts=3)
    store.touch_queued([ids[1]], clock.now)
    assert store.queued_ids(clock.now) == [ids[2]]


def test_unfinished_quota_is_atomic_with_creation(store):
    store.create_checks("acme", [NewCheck({"i": i}) for i in range(3)], max_unfinished=5)
    with pytest.raises(QuotaExceededError) as info:
        store.create_checks("acme", [NewCheck({"i": i}) for i in range(3)], max_unfinished=5)
    assert (info.value.limit, info.value.unfinished, info.value.requested) == (5, 3, 3)
    assert store.count_unfinished("acme") == 3  # nothing of the refused batch was stored
    assert store.list_batches("acme") == []
    store.create_checks("other", [NewCheck({"i": 0})], max_unfinished=1)


def test_idempotency_key_states(store, clock):
    assert store.idempotency_begin("acme", "k1", "h1", 30) == ("new", None)
    assert store.idempotency_begin("acme", "k1", "h1", 30) == ("pending", None)
    assert store.idempotency_begin("acme", "k1", "h2", 30) == ("mismatch", None)
    assert store.idempotency_begin("other", "k1", "h2", 30) == ("new", None)  # per tenant
    store.idempotency_finish("acme", "k1", "chk_1")
    assert store.idempotency_begin("acme", "k1", "h1", 30) == ("done", "chk_1")
    assert store.idempotency_begin("acme", "k1", "h2", 30) == ("mismatch", None)
    store.idempotency_begin("acme", "k2", "h1", 30)
    store.idempotency_release("acme", "k2")
    assert store.idempotency_begin("acme", "k2", "h9", 30) == ("new", None)


def test_tokens_and_rate(store, clock):
    store.put_token("ab" * 32, "acme")
    assert store.tenant_for_token("ab" * 32) == "acme"
    assert [t.tenant for t in store.list_tokens()] == ["acme"]
    assert store.revoke_token("ab" * 32) is True
    assert store.tenant_for_token("ab" * 32) is None
    assert store.revoke_token("ab" * 32) is False
    clock.now = 6000.0  # the start of a 60 s window
    assert [store.hit_rate("acme", 60, 3) for _ in range(3)] == [0.0, 0.0, 0.0]
    clock.now += 20
    assert store.hit_rate("acme", 60, 3) == pytest.approx(40.0)
    assert store.hit_rate("other", 60, 3) == 0.0
    clock.now += 40
    assert store.hit_rate("acme", 60, 3) == 0.0  # a new window


def test_summarize_verdict_of_stable_and_indeterminate():
    assert summarize_verdict(_verdict("stable")).first_frequency_hz is None
    indeterminate = summarize_verdict(_verdict("indeterminate"))
    assert (indeterminate.verdict, indeterminate.unstable_count) == ("indeterminate", None)


def test_sqlite_retention_purge(tmp_path, clock):
    store = SqliteStore(tmp_path / "s.sqlite3", clock=clock, retention_s=3600)
    _, (old,) = store.create_checks("acme", [NewCheck({"i": 0})], as_batch=True,
                                    shared=SHARED_MAP)
    clock.now += 3000
    _, (young,) = store.create_checks("acme", [NewCheck({"i": 1})])
    clock.now += 1000
    assert store.purge(clock.now) == 1
    assert store.get_check("acme", old) is None and store.get_request(old) is None
    assert store.get_check("acme", young) is not None
    assert store.list_batches("acme") == []
    assert store._conn().execute("SELECT COUNT(*) FROM blobs").fetchone()[0] == 0


def test_redis_keys_carry_the_retention_ttl(clock):
    from tests.conftest import TEST_REDIS_URL, _redis_store

    gen = _redis_store(clock)
    store = next(gen)
    try:
        store.retention_s = 3600
        batch_id, (cid,) = store.create_checks(
            "acme", [NewCheck({"i": 0})], as_batch=True, shared=SHARED_MAP)
        keys = set(store.r.scan_iter(match=store.p + "*"))
        owned = {k for k in keys if not k.endswith((":open", "queued"))}
        assert {f"{store.p}check:{cid}", f"{store.p}req:{cid}", f"{store.p}batch:{batch_id}",
                f"{store.p}blob:{content_hash(SHARED_MAP)}"} <= owned, TEST_REDIS_URL
        for key in owned:
            assert 0 < store.r.ttl(key) <= 3600, key
    finally:
        gen.close()


_CLAIM_SCRIPT = """
import sys
from service.store.sqlite_store import SqliteStore
store = SqliteStore(sys.argv[1])
won = [cid for cid in sys.argv[2:] if store.claim(cid, lease_s=600, max_attempts=3)]
print(len(won))
"""


def test_sqlite_is_safe_across_processes_and_restarts(tmp_path):
    path = tmp_path / "shared.sqlite3"
    store = SqliteStore(path)
    _, ids = store.create_checks("acme", [NewCheck({"i": i}) for i in range(60)])
    store.close()
    procs = [
        subprocess.Popen([sys.executable, "-c", _CLAIM_SCRIPT, str(path), *ids],
                         stdout=subprocess.PIPE, text=True)
        for _ in range(4)
    ]
    wins = [int(p.communicate(timeout=60)[0]) for p in procs]
    assert all(p.returncode == 0 for p in procs)
    assert sum(wins) == 60  # every check claimed exactly once across the four processes
    reopened = SqliteStore(path)
    assert all(reopened.get_check("acme", cid).attempts == 1 for cid in ids)


def test_quota_holds_under_concurrent_submissions(store):
    outcomes: list[bool] = []
    barrier = threading.Barrier(10)

    def submit() -> None:
        barrier.wait()
        try:
            store.create_checks("acme", [NewCheck({"i": i}) for i in range(3)], max_unfinished=12)
            outcomes.append(True)
        except QuotaExceededError:
            outcomes.append(False)

    threads = [threading.Thread(target=submit) for _ in range(10)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert outcomes.count(True) == 4 and store.count_unfinished("acme") == 12


def test_redis_purge_drops_unfinished_entries_without_a_record(clock):
    from tests.conftest import _redis_store

    gen = _redis_store(clock)
    store = next(gen)
    try:
        _, (cid,) = store.create_checks("acme", [NewCheck({"i": 0})])
        store.r.sadd(f"{store.p}t:acme:open", "chk_lost-in-a-crash")
        assert store.count_unfinished("acme") == 2
        assert store.purge(clock.now) == 1
        assert store.count_unfinished("acme") == 1 and store.get_check("acme", cid) is not None
    finally:
        gen.close()


def test_request_json_given_as_str_or_utf8_bytes_reads_back_as_the_request(store):
    # The API hands batch variants over as UTF-8 JSON bytes (orjson.dumps) and single checks as
    # the body text; RFC 8259 §8.1: JSON text exchanged between systems is UTF-8.
    request = {"frequency_hz": [1e9, 2e9], "ports": [{"name": "Ω", "role": "external"}]}
    as_bytes = json.dumps(request, ensure_ascii=False).encode("utf-8")
    as_text = json.dumps(request)
    _, ids = store.create_checks("acme", [NewCheck(request, request_json=as_bytes),
                                          NewCheck(request, request_json=as_text),
                                          NewCheck(request)])
    assert [store.get_request(i) for i in ids] == [request, request, request]


def test_on_stored_hands_over_every_id_once_in_order_after_it_is_stored(store, monkeypatch):
    # Contract of Store.create_checks: each id is handed to on_stored exactly once, and only
    # when its check can be read back (a worker may claim it at once). Redis writes in chunks:
    # make them small so that a 7-check batch takes several.
    monkeypatch.setattr("service.store.redis_store.STORE_CHUNK_CHECKS", 3)
    handed: list[list[str]] = []
    readable: list[bool] = []

    def on_stored(ids: list[str]) -> None:
        first = sum(len(chunk) for chunk in handed)
        readable.extend(store.get_check("acme", cid).status == "queued"
                        and store.get_request(cid) == merge_request(SHARED_MAP, _variant(first + k))
                        for k, cid in enumerate(ids))
        handed.append(list(ids))

    checks = [NewCheck(_variant(i), label=f"v{i}") for i in range(7)]
    batch_id, ids = store.create_checks("acme", checks, as_batch=True, shared=SHARED_MAP,
                                        on_stored=on_stored)
    assert [cid for chunk in handed for cid in chunk] == ids and readable == [True] * 7
    if not isinstance(store, SqliteStore):
        assert [len(chunk) for chunk in handed] == [3, 3, 1]
    batch = store.get_batch("acme", batch_id)
    assert list(batch.check_ids) == ids and batch.counts_by_status.get("queued") == 7


def test_redis_batch_is_invisible_until_all_chunks_are_stored(clock, monkeypatch):
    # A batch id must not answer (nor be listed) before every check is stored; a failure
    # part-way deletes the chunks already stored (their queued messages then find nothing to
    # run) and gives the whole quota back.
    from tests.conftest import _redis_store

    monkeypatch.setattr("service.store.redis_store.STORE_CHUNK_CHECKS", 2)
    gen = _redis_store(clock)
    store = next(gen)
    try:
        seen: list[int] = []
        handed: list[str] = []

        def on_stored(ids: list[str]) -> None:
            seen.append(len(store.list_batches("acme")))
            handed.extend(ids)
            if len(seen) == 2:
                raise ConnectionError("broker gone")

        checks = [NewCheck({"i": i}) for i in range(5)]
        with pytest.raises(ConnectionError):
            store.create_checks("acme", checks, as_batch=True, max_unfinished=10,
                                on_stored=on_stored)
        assert seen == [0, 0] and store.list_batches("acme") == [] and len(handed) == 4
        assert [store.get_check_any(cid) for cid in handed] == [None] * 4
        assert [store.get_request(cid) for cid in handed] == [None] * 4
        assert store.claim(handed[0], 60, 3) is None  # a late message runs nothing
        assert store.count_unfinished("acme") == 0

        def count_visible(ids: list[str]) -> None:
            seen.append(len(store.list_batches("acme")))

        seen.clear()
        batch_id, _ = store.create_checks("acme", checks, as_batch=True,
                                          on_stored=count_visible)
        assert seen == [0, 0, 0] and [b.id for b in store.list_batches("acme")] == [batch_id]
        assert store.get_batch("acme", batch_id).counts_by_status.get("queued") == 5
    finally:
        gen.close()


class _Rejecting:
    """A lazy source of checks that raises when item ``bad`` is reached (as the API's
    validating source does for an invalid variant)."""

    def __init__(self, n: int, bad: int) -> None:
        self.n, self.bad, self.made = n, bad, 0

    def __len__(self) -> int:
        return self.n

    def __iter__(self):
        for i in range(self.n):
            if i == self.bad:
                raise ValueError(f"variant {i} is invalid")
            self.made += 1
            yield NewCheck({"i": i}, label=f"v{i}")


def test_a_lazy_source_that_raises_leaves_nothing_stored(store, monkeypatch):
    monkeypatch.setattr("service.store.redis_store.STORE_CHUNK_CHECKS", 3)
    handed: list[str] = []
    checks = _Rejecting(8, bad=7)
    with pytest.raises(ValueError, match="variant 7"):
        store.create_checks("acme", checks, as_batch=True, shared=SHARED_MAP,
                            max_unfinished=8, on_stored=handed.extend)
    assert checks.made == 7
    # Redis had stored and handed over two chunks of three; SQLite writes nothing before the end
    assert len(handed) == (0 if isinstance(store, SqliteStore) else 6)
    assert all(store.get_check_any(cid) is None for cid in handed)
    assert store.list_batches("acme") == [] and store.count_unfinished("acme") == 0
    # the whole quota is free again
    _, ids = store.create_checks("acme", [NewCheck({"i": i}) for i in range(8)],
                                 max_unfinished=8)
    assert len(ids) == 8


def test_redis_reads_a_shared_map_once_per_store_object(clock, monkeypatch):
    # A blob key is the SHA-256 of its content (content addressing), so its text can be kept:
    # the variants of a batch all read back the same merged requests with one read of the map.
    from tests.conftest import _redis_store

    gen = _redis_store(clock)
    store = next(gen)
    try:
        checks = [NewCheck(_variant(i)) for i in range(4)]
        _, ids = store.create_checks("acme", checks, as_batch=True, shared=SHARED_MAP)
        blob_reads: list[str] = []
        plain_get = store.r.get

        def counting_get(key):
            if ":blob:" in key:
                blob_reads.append(key)
            return plain_get(key)

        monkeypatch.setattr(store.r, "get", counting_get)
        assert [store.get_request(cid) for cid in ids] == [
            merge_request(SHARED_MAP, _variant(i)) for i in range(4)]
        assert len(blob_reads) == 1
        monkeypatch.setattr("service.store.redis_store.SHARED_CACHE_ENTRIES", 1)
        other = {**SHARED_MAP, "devices": [{"name": "q2"}]}
        _, (cid,) = store.create_checks("acme", [NewCheck(_variant(9))], as_batch=True,
                                        shared=other)
        assert store.get_request(cid) == merge_request(other, _variant(9))
        assert store.get_request(ids[0]) == merge_request(SHARED_MAP, _variant(0))
        assert len(blob_reads) == 3  # the second map pushed the first out of a one-entry cache
    finally:
        gen.close()
