"""The two stores, by concern: ``CheckStore`` (checks and batches from acceptance to retention)
and ``AccessStore`` (who may ask, how often, and idempotent retries).

Each has a Redis implementation (distributed deployments, ``workers.store.redis_backend``) and a
SQLite one (the embedded default, ``workers.store.sqlite_backend``); ``workers.store.open_stores``
opens both on one URL. Only check ids cross the queue: workers read requests from the check store
and write verdicts to it. Every status change is a compare-and-set, so a late or duplicated task
cannot undo a final state.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any, Protocol

from workers.store.records import (
    BatchRecord,
    CheckRecord,
    CheckSource,
    DueCallback,
    IdempotencyState,
    Route,
    StoredRequest,
    Submission,
    TokenRecord,
)


class CheckStore(Protocol):
    """Check lifecycle, claims and leases, the reconciler's indexes and retention."""

    retention_s: float

    # -- accepting work ---------------------------------------------------------------------------
    def create_checks(
        self, tenant: str, checks: CheckSource, *, batch_label: str | None = None,
        as_batch: bool = False, shared: Mapping[str, bytes] | None = None,
        max_unfinished: int | None = None,
        on_stored: Callable[[list[str]], None] | None = None,
        submission: Submission | None = None, max_urgent: int | None = None,
    ) -> tuple[str | None, list[str]]:
        """Store requests as ``queued``; returns (batch id or None, check ids).

        ``submission`` gives their priority, the id of the request that sent them and a batch's
        callback URL; urgent checks also count against ``max_urgent`` unfinished urgent checks
        per tenant (:class:`UrgentQuotaExceededError`, storing nothing).

        ``shared`` (content hash → bytes) is what the checks' payloads may refer to: each entry
        is stored once and handed back with every check's request; a lazy source may add to it
        while it makes its checks. Raises :class:`QuotaExceededError` (storing nothing) when the
        tenant would go above ``max_unfinished`` queued+running checks. ``checks`` may be lazy
        (its length known, its items made while it is iterated, e.g. validated one by one) and
        raise to abort. ``on_stored(ids)`` is called once the checks ``ids`` are stored (a store
        may call it several times, chunk by chunk, so that they can be queued while the rest is
        made and written); a batch's record is written after all its checks, so a batch is
        visible only once complete. If anything fails before the end, the checks already stored
        are deleted again (a queued message for one then finds nothing to run) and the quota is
        released.
        """
        ...

    # -- reading ----------------------------------------------------------------------------------
    def get_check(self, tenant: str, check_id: str) -> CheckRecord | None: ...
    def get_check_any(self, check_id: str) -> CheckRecord | None:
        """The record whatever its tenant (workers and the reconciler)."""
        ...

    def get_request(self, check_id: str) -> StoredRequest | None: ...
    def get_batch(self, tenant: str, batch_id: str) -> BatchRecord | None: ...
    def list_batches(self, tenant: str, limit: int = 50) -> list[BatchRecord]:
        """Most recent first; ``check_ids`` left empty, counts filled."""
        ...

    def list_batch_checks(
        self, tenant: str, batch_id: str, *, after: str | None, limit: int,
        status: str | None = None, verdict: str | None = None,
    ) -> tuple[list[CheckRecord], str | None]:
        """One page of a batch's checks in submission order; returns (page, next cursor)."""
        ...

    def count_unfinished(self, tenant: str) -> int: ...

    # -- state changes (compare-and-set) ----------------------------------------------------------
    def claim(self, check_id: str, lease_s: float, max_attempts: int,
              worker: str | None = None) -> CheckRecord | None:
        """queued (or running with an expired lease) → running, attempts += 1; else None.

        A check whose attempts already reached ``max_attempts`` becomes ``failed`` instead.
        ``worker`` (the claiming worker's name) is kept while it runs, so that the reconciler can
        hand the check on when that worker's heartbeat stops.
        """
        ...

    def complete(self, check_id: str, verdict: dict[str, Any]) -> bool:
        """running → done with the verdict; False if the check was not running."""
        ...

    def fail(self, check_id: str, reason: str) -> bool:
        """queued or running → failed with the reason; False if already final."""
        ...

    def release(self, check_id: str) -> bool:
        """End a running check's lease now (its worker process died), so that the next delivery
        claims it at once instead of after the lease; False if the check is not running."""
        ...

    def cancel_check(self, tenant: str, check_id: str) -> CheckRecord | None:
        """queued or running → cancelled; returns the record after (unchanged if final)."""
        ...

    def cancel_batch(self, tenant: str, batch_id: str) -> BatchRecord | None: ...

    # -- the reconciler's indexes and retention ---------------------------------------------------
    def expired_leases(self, now: float) -> list[str]:
        """Ids of running checks whose lease ended before ``now``."""
        ...

    def queued_ids(self, older_than: float) -> list[str]:
        """Ids of queued checks that entered the queue (or were touched) before ``older_than``."""
        ...

    def touch_queued(self, check_ids: list[str], now: float) -> None:
        """Record that these queued checks were (re-)enqueued at ``now``."""
        ...

    def purge(self, now: float) -> int:
        """Delete what is older than the retention; returns how many checks went (Redis: TTLs)."""
        ...

    # -- queues per tenant, running checks per worker ---------------------------------------------
    def routes(self, check_ids: list[str]) -> dict[str, Route]:
        """Each known check's tenant and priority (what its queue message needs)."""
        ...

    def tenants(self) -> list[str]:
        """The tenants whose queues workers consume: every tenant that has ever queued checks
        (a check re-queued after its worker died may be the only one of its tenant)."""
        ...

    def running_workers(self) -> dict[str, str | None]:
        """Running checks and the worker that claimed each (None: claimed by an older version)."""
        ...

    # -- batch callbacks --------------------------------------------------------------------------
    def due_callbacks(self, now: float, lease_s: float, limit: int = 20) -> list[DueCallback]:
        """Finished batches whose callback waits and is due; each is held for ``lease_s`` (not
        handed out again meanwhile), so that one sender delivers it at a time."""
        ...

    def callback_result(self, batch_id: str, *, delivered: bool, attempts: int,
                        next_at: float | None, error: str | None = None) -> None:
        """Record an attempt: delivered, to be tried again at ``next_at``, or (``next_at`` None
        and not delivered) given up."""
        ...

    def ping(self) -> bool: ...
    def close(self) -> None: ...


class AccessStore(Protocol):
    """API tokens and their tenants, per-tenant request rates, idempotency keys."""

    retention_s: float

    def idempotency_begin(
        self, tenant: str, key: str, body_hash: str, pending_ttl_s: float,
    ) -> tuple[IdempotencyState, str | None]:
        """Reserve ``key`` for this body: ``new`` (reserved now), ``pending`` (another request
        holds it), ``mismatch`` (used with another body) or ``done`` with the check id."""
        ...

    def idempotency_finish(self, tenant: str, key: str, check_id: str) -> None: ...
    def idempotency_release(self, tenant: str, key: str) -> None: ...

    def put_token(self, token_hash: str, tenant: str) -> None: ...
    def tenant_for_token(self, token_hash: str) -> str | None: ...
    def get_token(self, token_hash: str) -> TokenRecord | None: ...
    def list_tokens(self) -> list[TokenRecord]: ...
    def revoke_token(self, token_hash: str) -> bool: ...
    def hit_rate(self, tenant: str, window_s: float, limit: int) -> float:
        """Count one request in the tenant's current window; 0 if allowed, else seconds to wait."""
        ...

    def count_checks(self, tenant: str, window_s: float, limit: int, amount: int) -> float:
        """Count ``amount`` checks created in the tenant's current window if they fit under
        ``limit`` (0 returned), else count nothing and return the seconds to wait; a negative
        ``amount`` gives checks back (a submission that failed after counting)."""
        ...

    def webhook_secrets(self, tenant: str, now: float) -> tuple[str, ...]:
        """The tenant's callback signing secrets: the current one first, then a previous one
        still inside its grace period after a rotation; empty if none was made."""
        ...

    def put_webhook_secret(self, tenant: str, secret: str, now: float, grace_s: float) -> None:
        """Make ``secret`` the current one; the one it replaces stays valid for ``grace_s``."""
        ...

    def purge(self, now: float) -> int:
        """Drop idempotency keys past their expiry (Redis: TTLs); returns how many went."""
        ...

    def ping(self) -> bool: ...
    def close(self) -> None: ...
