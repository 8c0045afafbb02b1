"""Delivering batch callbacks at least once: a thread in every worker's main process asks the
store for finished batches whose callback is due, POSTs the signed summary to the batch's URL
and records the attempt.

A delivery counts when the answer is 2xx (Standard Webhooks, "Delivery success and failure");
redirects are not followed (a 3xx is a failed attempt); 410 Gone stops the retries; anything
else (other codes, time-outs, refused connections) is tried again after the next delay of
``BALLAST_CALLBACK_RETRY_S`` (default 5 s, 1 min, 5 min, 30 min, 2 h, 5 h; a longer Retry-After
is honoured) and then given up (``callback_status`` ``failed``). The target is checked again
before each attempt (``workers.callbacks.targets``). The ``webhook-id`` (``msg_<batch id>``)
stays the same across attempts, so a receiver can drop a repeated delivery.
"""

from __future__ import annotations

import json
import logging
import os
import threading
import time
from collections.abc import Callable
from datetime import UTC, datetime
from typing import Any

import requests

from workers.callbacks.signing import new_secret, signature_header
from workers.callbacks.targets import TargetRefusedError, check_target, private_targets_allowed
from workers.store import AccessStore, BatchRecord, CheckStore, DueCallback

log = logging.getLogger("ballast.callbacks")

DEFAULT_RETRY_S = (5.0, 60.0, 300.0, 1800.0, 7200.0, 18000.0)
REQUEST_TIMEOUT_S = 15.0
HOLD_S = 60.0  # a taken callback is not handed to another sender for this long
SECRET_GRACE_S = 24 * 3600.0
EVENT_TYPE = "batch.finished"


def retry_delays(environ: dict[str, str] | None = None) -> tuple[float, ...]:
    raw = (os.environ if environ is None else environ).get("BALLAST_CALLBACK_RETRY_S", "")
    return tuple(float(x) for x in raw.split(",") if x.strip()) or DEFAULT_RETRY_S


def _iso(ts: float) -> str:
    return datetime.fromtimestamp(ts, UTC).isoformat(timespec="milliseconds").replace(
        "+00:00", "Z")


def payload(batch: BatchRecord, now: float) -> bytes:
    """The callback body (compact JSON): the event type, when it was sent, and the batch's
    counts as ``GET /v1/batches/{id}`` shows them."""
    return json.dumps({
        "type": EVENT_TYPE,
        "timestamp": _iso(now),
        "data": {
            "id": batch.id, "label": batch.label, "size": len(batch.check_ids),
            "priority": batch.priority, "finished": batch.finished,
            "counts_by_status": batch.counts_by_status,
            "counts_by_verdict": batch.counts_by_verdict,
        },
    }, separators=(",", ":")).encode()


def tenant_secrets(access: AccessStore, tenant: str, now: float) -> tuple[str, ...]:
    """The tenant's signing secrets, a first one made if it has none yet."""
    found = access.webhook_secrets(tenant, now)
    if not found:
        access.put_webhook_secret(tenant, new_secret(), now, 0.0)
        found = access.webhook_secrets(tenant, now)
    return found


class CallbackSender:
    """One pass is :meth:`tick`; :meth:`start` runs passes every second on a daemon thread."""

    def __init__(self, store: CheckStore, access: AccessStore, *,
                 session: requests.Session | None = None,
                 clock: Callable[[], float] = time.time,
                 delays: tuple[float, ...] | None = None,
                 allow_private: bool | None = None) -> None:
        self.store = store
        self.access = access
        self.session = session or requests.Session()
        self.session.trust_env = False  # no proxy settings from the environment
        self.clock = clock
        self.delays = delays or retry_delays()
        self.allow_private = private_targets_allowed() if allow_private is None \
            else allow_private
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None

    def tick(self) -> int:
        """Deliver what is due; returns how many deliveries succeeded."""
        delivered = 0
        for due in self.store.due_callbacks(self.clock(), HOLD_S):
            delivered += self.deliver(due)
        return delivered

    def deliver(self, due: DueCallback) -> bool:
        now = self.clock()
        attempts = due.attempts + 1
        batch = self.store.get_batch(due.tenant, due.batch_id)
        if batch is None:  # expired with the retention
            return False
        error: str | None = None
        retry_after = 0.0
        try:
            check_target(due.url, allow_private=self.allow_private)
            body = payload(batch, now)
            message_id = f"msg_{due.batch_id}"
            stamp = int(now)
            answer = self.session.post(due.url, data=body, timeout=REQUEST_TIMEOUT_S,
                                       allow_redirects=False, headers={
                                           "content-type": "application/json",
                                           "webhook-id": message_id,
                                           "webhook-timestamp": str(stamp),
                                           "webhook-signature": signature_header(
                                               tenant_secrets(self.access, due.tenant, now),
                                               message_id, stamp, body)})
            if 200 <= answer.status_code < 300:
                self.store.callback_result(due.batch_id, delivered=True, attempts=attempts,
                                           next_at=None)
                log.info("callback of batch %s delivered", due.batch_id,
                         extra={"batch_id": due.batch_id, "attempt": attempts})
                return True
            error = f"HTTP {answer.status_code}"
            if answer.status_code == 410:
                attempts = len(self.delays) + 1  # the receiver asks for no more
            retry_after = _seconds(answer.headers.get("Retry-After"))
        except TargetRefusedError as exc:
            error = f"target refused: {exc}"
        except requests.RequestException as exc:
            error = f"{type(exc).__name__}"
        next_at = None
        if attempts <= len(self.delays):
            next_at = now + max(self.delays[attempts - 1], min(retry_after, 3600.0))
        self.store.callback_result(due.batch_id, delivered=False, attempts=attempts,
                                   next_at=next_at, error=error)
        log.warning("callback of batch %s failed (%s); %s", due.batch_id, error,
                    "will retry" if next_at else "giving up",
                    extra={"batch_id": due.batch_id, "attempt": attempts})
        return False

    def _loop(self) -> None:
        while not self._stop.wait(1.0):
            try:
                self.tick()
            except Exception as exc:  # a store outage: try again next second
                log.warning("callback pass failed: %s", exc)

    def start(self) -> None:
        self._thread = threading.Thread(target=self._loop, name="ballast-callbacks",
                                        daemon=True)
        self._thread.start()

    def stop(self) -> None:
        self._stop.set()
        if self._thread is not None:
            self._thread.join(timeout=5)


def _seconds(value: Any) -> float:
    try:
        return max(0.0, float(value))
    except (TypeError, ValueError):
        return 0.0
