"""The check store's contract, run against both back ends (SQLite file and a real Redis server).

The expected behaviour comes from the service issue (states queued → running → done|failed|
cancelled by compare-and-set, attempts capped, per-tenant isolation, retention; a batch visible
only once complete, nothing left of a batch that failed part-way), not from the implementation.
The store keeps a request's bytes as given and hands them back with their encoding's name.
"""

from __future__ import annotations

import hashlib
import subprocess
import sys
import threading

import pytest

from tests.conftest import redis_stores, sqlite_stores
from workers.store import NewCheck, QuotaExceededError, StoredRequest
from workers.store.records import summarize_verdict
from workers.store.sqlite_backend import SqliteCheckStore

OPAQUE = "test/opaque"
EVERY_BYTE = bytes(range(256))  # binary safety: NUL, non-UTF-8, MessagePack map markers


def _payload(i: int) -> bytes:
    return f"request {i}:".encode() + EVERY_BYTE


def _new(i: int, label: str | None = None) -> NewCheck:
    return NewCheck(_payload(i), OPAQUE, label)


def _blob(text: str) -> tuple[str, bytes]:
    body = text.encode() * 100
    return hashlib.sha256(body).hexdigest(), body


SHARED = dict([_blob("frequency grid"), _blob("device map")])


def _verdict(name: str, modes: list[dict] | None = None) -> dict:
    modes = modes or []
    return {"verdict": name, "unstable_count": 2 * len(modes) if name != "indeterminate" else None,
            "modes": modes, "diagnostics": []}


def test_create_and_read_single_check(checks):
    _, (cid,) = checks.create_checks("acme", [_new(0)])
    record = checks.get_check("acme", cid)
    assert record.status == "queued" and record.attempts == 0 and record.batch_id is None
    assert checks.get_request(cid) == StoredRequest(_payload(0), OPAQUE, {})
    # another tenant cannot see it (the API answers 404)
    assert checks.get_check("other", cid) is None
    assert checks.get_check("acme", "chk_does-not-exist") is None
    assert checks.get_request("chk_does-not-exist") is None
    assert checks.count_unfinished("acme") == 1 and checks.count_unfinished("other") == 0


def test_ids_are_long_and_distinct(checks):
    _, ids = checks.create_checks("acme", [_new(i) for i in range(50)])
    assert len(set(ids)) == 50
    # 16 random bytes → 22 base64url characters after the prefix (secrets.token_urlsafe)
    assert all(len(i) == len("chk_") + 22 for i in ids)


def test_batch_shared_bytes_are_stored_once_and_given_with_every_check(checks):
    batch_id, ids = checks.create_checks(
        "acme", [_new(i, label=f"v{i}") for i in range(3)], as_batch=True, batch_label="sweep",
        shared=SHARED)
    assert batch_id is not None and len(ids) == 3
    for i, cid in enumerate(ids):
        assert checks.get_request(cid) == StoredRequest(_payload(i), OPAQUE, SHARED)
        assert checks.get_check("acme", cid).label == f"v{i}"
    checks.create_checks("acme", [_new(9)], as_batch=True, shared=SHARED)
    if isinstance(checks, SqliteCheckStore):
        rows = checks._conn().execute("SELECT hash FROM blobs").fetchall()
        assert sorted(r[0] for r in rows) == sorted(SHARED)
    else:
        assert sorted(checks.r.scan_iter(match=f"{checks.p}blob:*")) == sorted(
            f"{checks.p}blob:{digest}" for digest in SHARED)
    batch = checks.get_batch("acme", batch_id)
    assert batch.check_ids == tuple(ids) and batch.label == "sweep"
    assert batch.counts_by_status == {"queued": 3} and batch.counts_by_verdict == {}
    assert checks.get_batch("other", batch_id) is None


def test_shared_bytes_a_lazy_source_adds_while_it_makes_its_checks(checks):
    # The API knows a batch's shared arrays once it has validated the first variant.
    shared: dict[str, bytes] = {}

    class Source:
        def __len__(self) -> int:
            return 3

        def __iter__(self):
            for i in range(3):
                if i == 0:
                    shared.update(SHARED)
                yield _new(i)

    _, ids = checks.create_checks("acme", Source(), as_batch=True, shared=shared)
    assert [checks.get_request(cid).shared for cid in ids] == [SHARED] * 3


def test_claim_complete_cycle_and_compare_and_set(checks, clock):
    _, (cid,) = checks.create_checks("acme", [_new(1)])
    claimed = checks.claim(cid, lease_s=60, max_attempts=3)
    assert claimed.status == "running" and claimed.attempts == 1
    assert claimed.lease_expires_at == pytest.approx(clock.now + 60)
    assert checks.claim(cid, lease_s=60, max_attempts=3) is None  # lease still held
    assert checks.count_unfinished("acme") == 1
    verdict = _verdict("unstable", [{"frequency_hz": 2.5e9, "nodes": ["g1", "d1"],
                                     "devices": ["Q1"]}])
    assert checks.complete(cid, verdict) is True
    done = checks.get_check("acme", cid)
    assert done.status == "done" and done.verdict == verdict and done.finished_at == clock.now
    assert checks.count_unfinished("acme") == 0
    # a final state never changes again
    assert checks.complete(cid, _verdict("stable")) is False
    assert checks.fail(cid, "late") is False
    assert checks.cancel_check("acme", cid).status == "done"
    assert checks.claim(cid, lease_s=60, max_attempts=3) is None
    assert checks.get_check("acme", cid).verdict == verdict


def test_complete_needs_running(checks):
    _, (cid,) = checks.create_checks("acme", [_new(1)])
    assert checks.complete(cid, _verdict("stable")) is False
    assert checks.get_check("acme", cid).status == "queued"


def test_expired_lease_is_claimable_again_and_attempts_are_capped(checks, clock):
    _, (cid,) = checks.create_checks("acme", [_new(1)])
    assert checks.claim(cid, lease_s=10, max_attempts=2).attempts == 1
    clock.now += 5
    assert checks.expired_leases(clock.now) == []
    clock.now += 10
    assert checks.expired_leases(clock.now) == [cid]
    assert checks.claim(cid, lease_s=10, max_attempts=2).attempts == 2
    clock.now += 11
    assert checks.claim(cid, lease_s=10, max_attempts=2) is None  # attempts used up → failed
    failed = checks.get_check("acme", cid)
    assert failed.status == "failed" and "2 attempts" in failed.error
    assert checks.expired_leases(clock.now) == []


def test_released_lease_is_claimable_at_once_and_attempts_still_count(checks, clock):
    """A worker process that died gives its check back: the next delivery claims it without
    waiting for the lease, and the attempts cap still ends a check that kills every worker."""
    _, (cid,) = checks.create_checks("acme", [_new(1)])
    assert checks.release(cid) is False  # queued: nothing to release
    assert checks.claim(cid, lease_s=600, max_attempts=2).attempts == 1
    assert checks.release(cid) is True
    assert checks.expired_leases(clock.now) == [cid]  # the reconciler sees it too
    assert checks.claim(cid, lease_s=600, max_attempts=2).attempts == 2  # same instant
    assert checks.release(cid) is True
    assert checks.claim(cid, lease_s=600, max_attempts=2) is None  # attempts used up → failed
    assert checks.get_check("acme", cid).status == "failed"
    assert checks.release(cid) is False  # final states keep no lease


def test_fail_records_reason(checks):
    _, (cid,) = checks.create_checks("acme", [_new(1)])
    checks.claim(cid, lease_s=60, max_attempts=3)
    assert checks.fail(cid, "hard time limit (300 s) exceeded") is True
    record = checks.get_check("acme", cid)
    assert record.status == "failed" and record.error == "hard time limit (300 s) exceeded"


def test_only_one_of_many_concurrent_claims_wins(checks):
    _, (cid,) = checks.create_checks("acme", [_new(1)])
    results: list[object] = []
    barrier = threading.Barrier(8)

    def claim() -> None:
        barrier.wait()
        results.append(checks.claim(cid, lease_s=60, max_attempts=5))

    threads = [threading.Thread(target=claim) for _ in range(8)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert sum(r is not None for r in results) == 1
    assert checks.get_check("acme", cid).attempts == 1


def test_cancel_check_and_batch(checks):
    batch_id, ids = checks.create_checks("acme", [_new(i) for i in range(4)], as_batch=True)
    checks.claim(ids[0], lease_s=60, max_attempts=3)
    checks.complete(ids[0], _verdict("stable"))
    checks.claim(ids[1], lease_s=60, max_attempts=3)
    assert checks.cancel_check("other", ids[2]) is None
    assert checks.get_check("acme", ids[2]).status == "queued"
    batch = checks.cancel_batch("acme", batch_id)
    assert batch.counts_by_status == {"done": 1, "cancelled": 3}
    assert batch.counts_by_verdict == {"stable": 1}
    assert checks.complete(ids[1], _verdict("stable")) is False  # the running one was cancelled
    assert checks.cancel_batch("other", batch_id) is None
    assert checks.count_unfinished("acme") == 0


def test_batch_counts_follow_every_transition(checks):
    batch_id, ids = checks.create_checks("acme", [_new(i) for i in range(5)], as_batch=True)
    for cid, name in zip(ids[:3], ["stable", "unstable", "unstable"], strict=True):
        checks.claim(cid, lease_s=60, max_attempts=3)
        checks.complete(cid, _verdict(name))
    checks.claim(ids[3], lease_s=60, max_attempts=3)
    batch = checks.get_batch("acme", batch_id)
    assert batch.counts_by_status == {"done": 3, "running": 1, "queued": 1}
    assert batch.counts_by_verdict == {"stable": 1, "unstable": 2}


def test_listing_pages_and_filters(checks):
    n = 25
    batch_id, ids = checks.create_checks(
        "acme", [_new(i, label=f"v{i}") for i in range(n)], as_batch=True)
    unstable_mode = {"frequency_hz": 3e9, "nodes": ["d1"], "devices": ["Q1"]}
    low_mode = {"frequency_hz": 1e9, "nodes": ["g2", "d2"], "devices": ["Q2"]}
    for i in range(0, n, 3):
        checks.claim(ids[i], lease_s=60, max_attempts=3)
        checks.complete(ids[i], _verdict("unstable", [unstable_mode, low_mode]))
    seen: list[str] = []
    cursor = None
    pages = 0
    while True:
        page, cursor = checks.list_batch_checks("acme", batch_id, after=cursor, limit=10)
        seen += [r.id for r in page]
        pages += 1
        if cursor is None:
            break
    assert seen == ids and pages == 3
    unstable, cursor = checks.list_batch_checks(
        "acme", batch_id, after=None, limit=100, verdict="unstable")
    assert [r.id for r in unstable] == ids[0:n:3] and cursor is None
    summary = unstable[0].summary
    # the first offending mode is the lowest in frequency; its first node is the strongest
    assert (summary.verdict, summary.unstable_count) == ("unstable", 4)
    assert (summary.first_frequency_hz, summary.first_node) == (1e9, "g2")
    queued, _ = checks.list_batch_checks("acme", batch_id, after=None, limit=100, status="queued")
    assert len(queued) == n - len(ids[0:n:3]) and all(r.status == "queued" for r in queued)
    assert checks.list_batch_checks("other", batch_id, after=None, limit=10) == ([], None)
    # a filtered page with exactly `limit` matches left has no next cursor
    page, cursor = checks.list_batch_checks(
        "acme", batch_id, after=None, limit=len(ids[0:n:3]), verdict="unstable")
    assert len(page) == len(ids[0:n:3]) and cursor is None


def test_list_batches_most_recent_first(checks, clock):
    first, _ = checks.create_checks("acme", [_new(0)], as_batch=True, batch_label="a")
    clock.now += 1
    second, _ = checks.create_checks("acme", [_new(1)], as_batch=True, batch_label="b")
    checks.create_checks("other", [_new(2)], as_batch=True)
    batches = checks.list_batches("acme")
    assert [b.id for b in batches] == [second, first]
    assert batches[0].counts_by_status == {"queued": 1}
    assert [b.id for b in checks.list_batches("acme", limit=1)] == [second]


def test_queued_ids_and_touch(checks, clock):
    _, ids = checks.create_checks("acme", [_new(i) for i in range(3)])
    assert checks.queued_ids(clock.now) == []
    clock.now += 30
    assert sorted(checks.queued_ids(clock.now)) == sorted(ids)
    checks.claim(ids[0], lease_s=60, max_attempts=3)
    checks.touch_queued([ids[1]], clock.now)
    assert checks.queued_ids(clock.now) == [ids[2]]


def test_unfinished_quota_is_atomic_with_creation(checks):
    checks.create_checks("acme", [_new(i) for i in range(3)], max_unfinished=5)
    with pytest.raises(QuotaExceededError) as info:
        checks.create_checks("acme", [_new(i) for i in range(3)], max_unfinished=5)
    assert (info.value.limit, info.value.unfinished, info.value.requested) == (5, 3, 3)
    assert checks.count_unfinished("acme") == 3  # nothing of the refused batch was stored
    assert checks.list_batches("acme") == []
    checks.create_checks("other", [_new(0)], max_unfinished=1)


def test_quota_holds_under_concurrent_submissions(checks):
    outcomes: list[bool] = []
    barrier = threading.Barrier(10)

    def submit() -> None:
        barrier.wait()
        try:
            checks.create_checks("acme", [_new(i) for i in range(3)], max_unfinished=12)
            outcomes.append(True)
        except QuotaExceededError:
            outcomes.append(False)

    threads = [threading.Thread(target=submit) for _ in range(10)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert outcomes.count(True) == 4 and checks.count_unfinished("acme") == 12


def test_summarize_verdict_of_stable_and_indeterminate():
    assert summarize_verdict(_verdict("stable")).first_frequency_hz is None
    indeterminate = summarize_verdict(_verdict("indeterminate"))
    assert (indeterminate.verdict, indeterminate.unstable_count) == ("indeterminate", None)


def test_sqlite_retention_purge(tmp_path, clock):
    checks = sqlite_stores(tmp_path / "s.sqlite3", clock, retention_s=3600).checks
    _, (old,) = checks.create_checks("acme", [_new(0)], as_batch=True, shared=SHARED)
    clock.now += 3000
    _, (young,) = checks.create_checks("acme", [_new(1)])
    clock.now += 1000
    assert checks.purge(clock.now) == 1
    assert checks.get_check("acme", old) is None and checks.get_request(old) is None
    assert checks.get_check("acme", young) is not None
    assert checks.list_batches("acme") == []
    assert checks._conn().execute("SELECT COUNT(*) FROM blobs").fetchone()[0] == 0


def test_sqlite_purge_keeps_old_shared_bytes_a_young_check_refers_to(tmp_path, clock):
    checks = sqlite_stores(tmp_path / "s.sqlite3", clock, retention_s=3600).checks
    checks.create_checks("acme", [_new(0)], as_batch=True, shared=SHARED)
    clock.now += 3000
    _, (young,) = checks.create_checks("acme", [_new(1)], as_batch=True, shared=SHARED)
    clock.now += 1000
    assert checks.purge(clock.now) == 1
    assert checks.get_request(young).shared == SHARED


def test_redis_keys_carry_the_retention_ttl(clock):
    gen = redis_stores(clock)
    checks = next(gen).checks
    try:
        checks.retention_s = 3600
        batch_id, (cid,) = checks.create_checks("acme", [_new(0)], as_batch=True, shared=SHARED)
        keys = set(checks.r.scan_iter(match=checks.p + "*"))
        # indexes (the tenant's unfinished ids, the reconciler's queued ids, the tenants whose
        # queues workers consume) are not owned by one check and carry no TTL
        owned = {k for k in keys if not k.endswith((":open", "queued", ":tenants"))}
        assert {f"{checks.p}check:{cid}", f"{checks.p}req:{cid}", f"{checks.p}batch:{batch_id}",
                *(f"{checks.p}blob:{d}" for d in SHARED)} <= owned
        for key in owned:
            assert 0 < checks.r.ttl(key) <= 3600, key
        checks.r.expire(f"{checks.p}blob:{next(iter(SHARED))}", 5)
        checks.claim(cid, 60, 3)  # a state change renews every key the check owns
        assert all(checks.r.ttl(f"{checks.p}blob:{d}") > 5 for d in SHARED)
    finally:
        gen.close()


_CLAIM_SCRIPT = """
import sys
from workers.store import open_stores
checks = open_stores(sys.argv[1]).checks
won = [cid for cid in sys.argv[2:] if checks.claim(cid, lease_s=600, max_attempts=3)]
print(len(won))
"""


def test_sqlite_is_safe_across_processes_and_restarts(tmp_path, clock):
    path = tmp_path / "shared.sqlite3"
    stores = sqlite_stores(path, clock)
    _, ids = stores.checks.create_checks("acme", [_new(i) for i in range(60)])
    stores.close()
    procs = [
        subprocess.Popen([sys.executable, "-c", _CLAIM_SCRIPT, str(path), *ids],
                         stdout=subprocess.PIPE, text=True)
        for _ in range(4)
    ]
    wins = [int(p.communicate(timeout=60)[0]) for p in procs]
    assert all(p.returncode == 0 for p in procs)
    assert sum(wins) == 60  # every check claimed exactly once across the four processes
    reopened = sqlite_stores(path, clock).checks
    assert all(reopened.get_check("acme", cid).attempts == 1 for cid in ids)


def test_redis_purge_drops_unfinished_entries_without_a_record(clock):
    gen = redis_stores(clock)
    checks = next(gen).checks
    try:
        _, (cid,) = checks.create_checks("acme", [_new(0)])
        checks.r.sadd(f"{checks.p}t:acme:open", "chk_lost-in-a-crash")
        assert checks.count_unfinished("acme") == 2
        assert checks.purge(clock.now) == 1
        assert checks.count_unfinished("acme") == 1 and checks.get_check("acme", cid) is not None
    finally:
        gen.close()


def test_on_stored_hands_over_every_id_once_in_order_after_it_is_stored(checks, monkeypatch):
    # Contract of CheckStore.create_checks: each id is handed to on_stored exactly once, and only
    # when its check can be read back (a worker may claim it at once). Redis writes in chunks:
    # make them small so that a 7-check batch takes several.
    monkeypatch.setattr("workers.store.redis_backend.checks.STORE_CHUNK_CHECKS", 3)
    handed: list[list[str]] = []
    readable: list[bool] = []

    def on_stored(ids: list[str]) -> None:
        first = sum(len(chunk) for chunk in handed)
        readable.extend(checks.get_check("acme", cid).status == "queued"
                        and checks.get_request(cid) == StoredRequest(
                            _payload(first + k), OPAQUE, SHARED)
                        for k, cid in enumerate(ids))
        handed.append(list(ids))

    batch_id, ids = checks.create_checks("acme", [_new(i, f"v{i}") for i in range(7)],
                                         as_batch=True, shared=SHARED, on_stored=on_stored)
    assert [cid for chunk in handed for cid in chunk] == ids and readable == [True] * 7
    if not isinstance(checks, SqliteCheckStore):
        assert [len(chunk) for chunk in handed] == [3, 3, 1]
    batch = checks.get_batch("acme", batch_id)
    assert list(batch.check_ids) == ids and batch.counts_by_status.get("queued") == 7


def test_redis_batch_is_invisible_until_all_chunks_are_stored(clock, monkeypatch):
    # A batch id must not answer (nor be listed) before every check is stored; a failure
    # part-way deletes the chunks already stored (their queued messages then find nothing to
    # run) and gives the whole quota back.
    monkeypatch.setattr("workers.store.redis_backend.checks.STORE_CHUNK_CHECKS", 2)
    gen = redis_stores(clock)
    checks = next(gen).checks
    try:
        seen: list[int] = []
        handed: list[str] = []

        def on_stored(ids: list[str]) -> None:
            seen.append(len(checks.list_batches("acme")))
            handed.extend(ids)
            if len(seen) == 2:
                raise ConnectionError("broker gone")

        new = [_new(i) for i in range(5)]
        with pytest.raises(ConnectionError):
            checks.create_checks("acme", new, as_batch=True, max_unfinished=10,
                                 on_stored=on_stored)
        assert seen == [0, 0] and checks.list_batches("acme") == [] and len(handed) == 4
        assert [checks.get_check_any(cid) for cid in handed] == [None] * 4
        assert [checks.get_request(cid) for cid in handed] == [None] * 4
        assert checks.claim(handed[0], 60, 3) is None  # a late message runs nothing
        assert checks.count_unfinished("acme") == 0

        def count_visible(ids: list[str]) -> None:
            seen.append(len(checks.list_batches("acme")))

        seen.clear()
        batch_id, _ = checks.create_checks("acme", new, as_batch=True, on_stored=count_visible)
        assert seen == [0, 0, 0] and [b.id for b in checks.list_batches("acme")] == [batch_id]
        assert checks.get_batch("acme", batch_id).counts_by_status.get("queued") == 5
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
            yield _new(i, label=f"v{i}")


def test_a_lazy_source_that_raises_leaves_nothing_stored(checks, monkeypatch):
    monkeypatch.setattr("workers.store.redis_backend.checks.STORE_CHUNK_CHECKS", 3)
    handed: list[str] = []
    source = _Rejecting(8, bad=7)
    with pytest.raises(ValueError, match="variant 7"):
        checks.create_checks("acme", source, as_batch=True, shared=SHARED, max_unfinished=8,
                             on_stored=handed.extend)
    assert source.made == 7
    # Redis had stored and handed over two chunks of three; SQLite writes nothing before the end
    assert len(handed) == (0 if isinstance(checks, SqliteCheckStore) else 6)
    assert all(checks.get_check_any(cid) is None for cid in handed)
    assert checks.list_batches("acme") == [] and checks.count_unfinished("acme") == 0
    # the whole quota is free again
    _, ids = checks.create_checks("acme", [_new(i) for i in range(8)], max_unfinished=8)
    assert len(ids) == 8


def test_redis_reads_shared_bytes_once_per_store_object(clock, monkeypatch):
    # A blob key is the SHA-256 of its content (content addressing), so what it holds can be
    # kept: the checks of a batch all read back with one read of each shared blob.
    gen = redis_stores(clock)
    checks = next(gen).checks
    try:
        _, ids = checks.create_checks("acme", [_new(i) for i in range(4)], as_batch=True,
                                      shared=SHARED)
        blob_reads: list[str] = []
        plain_pipeline = checks.r.pipeline

        def counting_pipeline(*args, **options):
            pipe = plain_pipeline(*args, **options)
            queue = pipe.execute_command

            def counting(*command, **command_options):
                if command[0] == "GET" and ":blob:" in command[1]:
                    blob_reads.append(command[1])
                return queue(*command, **command_options)

            pipe.execute_command = counting
            return pipe

        monkeypatch.setattr(checks.r, "pipeline", counting_pipeline)
        assert [checks.get_request(cid) for cid in ids] == [
            StoredRequest(_payload(i), OPAQUE, SHARED) for i in range(4)]
        monkeypatch.setattr("workers.store.redis_backend.reads.SHARED_CACHE_BYTES",
                            max(map(len, SHARED.values())))
        other = dict([_blob("another map")])
        _, (cid,) = checks.create_checks("acme", [_new(9)], as_batch=True, shared=other)
        assert checks.get_request(cid).shared == other
        assert checks.get_request(ids[0]).shared == SHARED
        # two at first; the small cache then held one entry: the other map, then SHARED again
        assert len(blob_reads) == 2 + 1 + 2
    finally:
        gen.close()


def test_a_request_whose_shared_bytes_are_gone_reads_as_missing(clock):
    gen = redis_stores(clock)
    checks = next(gen).checks
    try:
        _, (cid,) = checks.create_checks("acme", [_new(0)], as_batch=True, shared=SHARED)
        checks.r.delete(f"{checks.p}blob:{next(iter(SHARED))}")
        assert checks.get_request(cid) is None
    finally:
        gen.close()


def test_a_worker_store_rides_out_a_redis_restart(tmp_path, clock):
    # redis-py's Retry (workers.store.redis_backend.patient_retry) on a private redis-server that
    # is down for a second while a claim is sent: the claim waits and succeeds.
    from tests.support.queue_harness import REDIS_SERVER, RedisServer
    from workers.store import open_stores
    from workers.store.redis_backend import patient_retry

    if REDIS_SERVER is None:
        pytest.fail("redis-server is not installed (apt-get install redis-server)")
    server = RedisServer(tmp_path / "redis")
    server.start()
    try:
        checks = open_stores(server.url, redis_retry=patient_retry()).checks
        _, (cid,) = checks.create_checks("acme", [_new(0)])
        server.process.terminate()  # SIGTERM: Redis writes its append-only file and exits
        server.process.wait(timeout=30)
        restart = threading.Timer(1.0, server.start)
        restart.start()
        try:
            assert checks.claim(cid, lease_s=60, max_attempts=3).attempts == 1
        finally:
            restart.join()
        assert checks.get_check("acme", cid).status == "running"
        checks.close()
    finally:
        server.process.terminate()
        server.process.wait(timeout=30)
