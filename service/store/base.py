"""The service's own store: check requests, states and verdicts, per tenant.

Two implementations share this protocol: Redis (distributed deployments,
``service.store.redis_store``) and SQLite (the embedded default, ``service.store.sqlite_store``);
``service.store.open_store(url)`` picks one. Only check ids cross the queue; workers read requests
from here and write verdicts here.
Every status change is a compare-and-set, so a late or duplicated task cannot undo a final state.

A batch's shared port/device map is stored once, content-addressed by the SHA-256 of its canonical
JSON; each check of the batch stores only its own variant, and ``get_request`` returns the two
merged with :func:`merge_request` (the same merge the API validated).
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from typing import Any, Literal, Protocol

CheckStatus = Literal["queued", "running", "done", "failed", "cancelled"]
CHECK_STATUSES: tuple[str, ...] = ("queued", "running", "done", "failed", "cancelled")
FINAL_STATUSES: frozenset[str] = frozenset({"done", "failed", "cancelled"})
UNFINISHED_STATUSES: frozenset[str] = frozenset({"queued", "running"})
VerdictName = Literal["stable", "unstable", "indeterminate"]
VERDICT_NAMES: tuple[str, ...] = ("stable", "unstable", "indeterminate")
IdempotencyState = Literal["new", "pending", "mismatch", "done"]

DEFAULT_RETENTION_S = 7 * 24 * 3600.0
RELEASED_LEASE_AGE_S = 1.0  # a released lease reads as having ended this long ago


class QuotaExceededError(Exception):
    """Storing these checks would take the tenant above its limit of unfinished checks."""

    def __init__(self, limit: int, unfinished: int, requested: int) -> None:
        super().__init__(
            f"{unfinished} unfinished checks + {requested} new would exceed the limit of {limit}"
        )
        self.limit = limit
        self.unfinished = unfinished
        self.requested = requested


@dataclass(frozen=True)
class VerdictSummary:
    """What a batch listing shows of a verdict: its name, count and first offending mode."""

    verdict: str | None
    unstable_count: int | None
    first_frequency_hz: float | None
    first_node: str | None


@dataclass(frozen=True)
class CheckRecord:
    """One check as the API reports it (the request payload is fetched separately).

    ``verdict`` is the engine's verdict JSON exactly as stored; listings leave it ``None`` and fill
    only ``summary``.
    """

    id: str
    tenant: str
    status: CheckStatus
    created_at: float
    updated_at: float
    attempts: int = 0
    batch_id: str | None = None
    label: str | None = None
    started_at: float | None = None
    finished_at: float | None = None
    lease_expires_at: float | None = None
    verdict: dict[str, Any] | None = None
    error: str | None = None
    summary: VerdictSummary | None = None


@dataclass(frozen=True)
class BatchRecord:
    id: str
    tenant: str
    created_at: float
    check_ids: tuple[str, ...] = ()
    label: str | None = None
    counts_by_status: dict[str, int] = field(default_factory=dict)
    counts_by_verdict: dict[str, int] = field(default_factory=dict)


@dataclass(frozen=True)
class NewCheck:
    """A check to store: its JSON request (validated already) and an optional batch label.

    In a batch stored with a ``shared`` map, ``request`` holds only the variant's own members.
    ``request_json``, when given, is JSON text that decodes to ``request`` (a batch variant's
    text may also hold its ``label`` member); the store keeps it as it is instead of
    serialising ``request`` again, which for large numeric arrays costs as much as parsing them.
    """

    request: dict[str, Any] | None  # None: only ``request_json`` or ``request_binary`` given
    label: str | None = None
    request_json: str | bytes | None = None  # bytes: UTF-8
    request_binary: bytes | None = None  # the binary stored form (service.store.payload)

    def __post_init__(self) -> None:
        if self.request is None and self.request_json is None and self.request_binary is None:
            raise ValueError("a new check needs its request, or its request's stored text")

    def stored_payload(self) -> str | bytes:
        """What the store keeps: the binary form when given, else :meth:`stored_json`."""
        return self.request_binary if self.request_binary is not None else self.stored_json()

    def stored_json(self) -> str | bytes:
        """``request_json`` as given (str or UTF-8 bytes), else the canonical JSON text."""
        if self.request_json is not None:
            return self.request_json
        return canonical_json(self.request)

    def stored_size(self) -> int:
        """Length of the given stored text, else 0 (not worth serialising to find out)."""
        given = self.request_binary if self.request_binary is not None else self.request_json
        return len(given) if given is not None else 0

    def stored_text(self) -> str | bytes:
        """For a text column: JSON as str; the binary form stays bytes (a BLOB)."""
        if self.request_binary is not None:
            return self.request_binary
        text = self.stored_json()
        return text.decode("utf-8") if isinstance(text, bytes) else text


class CheckSource(Protocol):
    """What ``Store.create_checks`` takes: a list of checks, or a lazy source that knows how
    many it holds and makes each one when iterated (and may raise to abort)."""

    def __len__(self) -> int: ...
    def __iter__(self) -> Iterator[NewCheck]: ...


@dataclass(frozen=True)
class TokenRecord:
    """A stored API token: only its SHA-256 hex digest is kept."""

    token_hash: str
    tenant: str
    created_at: float


def canonical_json(value: Any) -> str:
    """JSON with sorted keys and no spaces: equal values give equal text (and equal hashes)."""
    return json.dumps(value, sort_keys=True, separators=(",", ":"), allow_nan=False)


def content_hash(value: Any) -> str:
    """SHA-256 hex digest of :func:`canonical_json` (content address of a shared payload)."""
    return hashlib.sha256(canonical_json(value).encode()).hexdigest()


VARIANT_ONLY_MEMBERS: tuple[str, ...] = ("label",)


def merge_request(shared: dict[str, Any] | None, variant: dict[str, Any]) -> dict[str, Any]:
    """The check request of one batch variant: the shared map's members, then the variant's
    (its ``label``, which names the variant and is no check request member, left out)."""
    merged = {**(shared or {}), **variant}
    for name in VARIANT_ONLY_MEMBERS:
        merged.pop(name, None)
    return merged


def summarize_verdict(verdict: dict[str, Any] | None) -> VerdictSummary | None:
    """Name, unstable count and the lowest-frequency mode's frequency and strongest node."""
    if not isinstance(verdict, dict):
        return None
    modes = [m for m in verdict.get("modes") or [] if isinstance(m, dict)]
    freq: float | None = None
    node: str | None = None
    with_freq = [m for m in modes if isinstance(m.get("frequency_hz"), int | float)]
    if with_freq:
        first = min(with_freq, key=lambda m: m["frequency_hz"])
        freq = float(first["frequency_hz"])
        nodes = first.get("nodes") or []
        node = str(nodes[0]) if nodes else None
    count = verdict.get("unstable_count")
    name = verdict.get("verdict")
    return VerdictSummary(
        verdict=name if isinstance(name, str) else None,
        unstable_count=count if isinstance(count, int) and not isinstance(count, bool) else None,
        first_frequency_hz=freq,
        first_node=node,
    )


class Store(Protocol):
    """What the API, the workers and the reconciler need from storage."""

    retention_s: float

    # -- accepting work ---------------------------------------------------------------------------
    def create_checks(
        self, tenant: str, checks: CheckSource, *, batch_label: str | None = None,
        as_batch: bool = False, shared: dict[str, Any] | None = None,
        max_unfinished: int | None = None,
        on_stored: Callable[[list[str]], None] | None = None,
    ) -> tuple[str | None, list[str]]:
        """Store requests as ``queued``; returns (batch id or None, check ids).

        ``shared`` (batches only) is stored once by content hash and merged under each variant.
        Raises :class:`QuotaExceededError` (storing nothing) when the tenant would go above
        ``max_unfinished`` queued+running checks. ``checks`` may be lazy (its length known, its
        items made while it is iterated, e.g. validated one by one) and raise to abort.
        ``on_stored(ids)`` is called once the checks ``ids`` are stored (a store may call it
        several times, chunk by chunk, so that they can be queued while the rest is made and
        written); a batch's record is written after all its checks, so a batch is visible only
        once complete. If anything fails before the end, the checks already stored are deleted
        again (a queued message for one then finds nothing to run) and the quota is released.
        """
        ...

    # -- reading ----------------------------------------------------------------------------------
    def get_check(self, tenant: str, check_id: str) -> CheckRecord | None: ...
    def get_check_any(self, check_id: str) -> CheckRecord | None:
        """The record whatever its tenant (workers and the reconciler)."""
        ...

    def get_request(self, check_id: str) -> dict[str, Any] | None: ...
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

    # -- state changes (compare-and-set) ----------------------------------------------------------
    def claim(self, check_id: str, lease_s: float, max_attempts: int) -> CheckRecord | None:
        """queued (or running with an expired lease) → running, attempts += 1; else None.

        A check whose attempts already reached ``max_attempts`` becomes ``failed`` instead.
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

    # -- idempotency ------------------------------------------------------------------------------
    def idempotency_begin(
        self, tenant: str, key: str, body_hash: str, pending_ttl_s: float,
    ) -> tuple[IdempotencyState, str | None]:
        """Reserve ``key`` for this body: ``new`` (reserved now), ``pending`` (another request
        holds it), ``mismatch`` (used with another body) or ``done`` with the check id."""
        ...

    def idempotency_finish(self, tenant: str, key: str, check_id: str) -> None: ...
    def idempotency_release(self, tenant: str, key: str) -> None: ...

    # -- tenants, tokens, limits ------------------------------------------------------------------
    def put_token(self, token_hash: str, tenant: str) -> None: ...
    def tenant_for_token(self, token_hash: str) -> str | None: ...
    def get_token(self, token_hash: str) -> TokenRecord | None: ...
    def list_tokens(self) -> list[TokenRecord]: ...
    def revoke_token(self, token_hash: str) -> bool: ...
    def count_unfinished(self, tenant: str) -> int: ...
    def hit_rate(self, tenant: str, window_s: float, limit: int) -> float:
        """Count one request in the tenant's current window; 0 if allowed, else seconds to wait."""
        ...

    def ping(self) -> bool: ...
    def close(self) -> None: ...
