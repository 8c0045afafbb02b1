"""What the stores keep and give back: check, batch and token records, checks to store, and the
stored form of a request (bytes with the name of their encoding, which the store never reads)."""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from dataclasses import dataclass, field
from typing import Any, Literal, Protocol

CheckStatus = Literal["queued", "running", "done", "failed", "cancelled"]
CHECK_STATUSES: tuple[str, ...] = ("queued", "running", "done", "failed", "cancelled")
FINAL_STATUSES: frozenset[str] = frozenset({"done", "failed", "cancelled"})
UNFINISHED_STATUSES: frozenset[str] = frozenset({"queued", "running"})
VerdictName = Literal["stable", "unstable", "indeterminate"]
VERDICT_NAMES: tuple[str, ...] = ("stable", "unstable", "indeterminate")
IdempotencyState = Literal["new", "pending", "mismatch", "done"]
Priority = Literal["normal", "urgent"]
PRIORITIES: tuple[str, ...] = ("normal", "urgent")
CallbackStatus = Literal["waiting", "delivered", "failed"]

DEFAULT_RETENTION_S = 7 * 24 * 3600.0
RELEASED_LEASE_AGE_S = 1.0  # a released lease reads as having ended this long ago
UNKNOWN_ENCODING = "unknown (stored by an earlier version)"


class QuotaExceededError(Exception):
    """Storing these checks would take the tenant above its limit of unfinished checks."""

    what = "unfinished checks"

    def __init__(self, limit: int, unfinished: int, requested: int) -> None:
        super().__init__(
            f"{unfinished} {self.what} + {requested} new would exceed the limit of {limit}"
        )
        self.limit = limit
        self.unfinished = unfinished
        self.requested = requested


class UrgentQuotaExceededError(QuotaExceededError):
    """Storing these urgent checks would take the tenant above its limit of unfinished urgent
    checks (urgent is bounded per tenant so that it cannot become the default)."""

    what = "unfinished urgent checks"


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
    extends: str | None = None
    priority: Priority = "normal"
    request_id: str | None = None
    worker: str | None = None


@dataclass(frozen=True)
class BatchRecord:
    id: str
    tenant: str
    created_at: float
    check_ids: tuple[str, ...] = ()
    label: str | None = None
    counts_by_status: dict[str, int] = field(default_factory=dict)
    counts_by_verdict: dict[str, int] = field(default_factory=dict)
    priority: Priority = "normal"
    callback_url: str | None = None
    callback_status: CallbackStatus | None = None

    @property
    def finished(self) -> bool:
        """No check of the batch is queued or running."""
        return not any(self.counts_by_status.get(s, 0) for s in UNFINISHED_STATUSES)


@dataclass(frozen=True)
class Submission:
    """How checks are to be queued: their priority, the request that sent them (its id travels
    into the worker's log lines) and, for a batch, the URL to call once it has finished."""

    priority: Priority = "normal"
    request_id: str | None = None
    callback_url: str | None = None


@dataclass(frozen=True)
class Route:
    """Where a check's queue message goes: its tenant's queue, at its priority."""

    tenant: str
    priority: Priority = "normal"


@dataclass(frozen=True)
class DueCallback:
    """A finished batch whose callback is due: ``attempts`` made so far."""

    batch_id: str
    tenant: str
    url: str
    attempts: int


@dataclass(frozen=True)
class NewCheck:
    """A check to store: its validated request in a stored form (``payload``, bytes the store
    keeps as they are), the name of that form (``encoding``, e.g.
    ``workers.intake.REQUEST_ENCODING``), an optional label, and ``extends``: the check whose
    samples it merges with new ones (``POST /v1/checks/{id}/samples``), if any."""

    payload: bytes
    encoding: str
    label: str | None = None
    extends: str | None = None


@dataclass(frozen=True)
class StoredRequest:
    """A check's request as stored: ``payload`` in ``encoding``, and ``shared``, the bytes its
    batch keeps once for all its checks, by content hash (empty for a single check)."""

    payload: bytes
    encoding: str
    shared: Mapping[str, bytes] = field(default_factory=dict)


class CheckSource(Protocol):
    """What ``CheckStore.create_checks`` takes: a list of checks, or a lazy source that knows how
    many it holds and makes each one when iterated (and may raise to abort)."""

    def __len__(self) -> int: ...
    def __iter__(self) -> Iterator[NewCheck]: ...


@dataclass(frozen=True)
class TokenRecord:
    """A stored API token: only its SHA-256 hex digest is kept."""

    token_hash: str
    tenant: str
    created_at: float


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
