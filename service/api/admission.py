"""Admitting checks for a tenant: its urgent bound, its rate of checks created, a batch's
callback target, then the store (which enforces the unfinished-checks quotas atomically) and the
tenant's queue.

Rate limits count checks created as well as requests: a batch of n variants takes n from the
tenant's ``check_rate_limit`` per ``BALLAST_RATE_WINDOW_S`` (given back if the batch is refused
later, e.g. for an invalid variant).
"""

from __future__ import annotations

import logging
from typing import Any

from flask import current_app, g

from service.api.tenancy import access_store, check_store, retry_after, tenant
from service.config import tenant_limit
from service.problems import abort_problem, field_errors
from workers.callbacks.targets import TargetRefusedError, check_target
from workers.metrics import SUBMITTED
from workers.store import CheckSource, Submission, UrgentQuotaExceededError

log = logging.getLogger("ballast.api")


def checked_callback(url: str | None) -> str | None:
    """``url`` if the callback may go there, else the 422 naming ``callback_url``."""
    if url is None:
        return None
    try:
        return check_target(url, allow_private=bool(
            current_app.config["BALLAST_CALLBACK_ALLOW_PRIVATE"]))
    except TargetRefusedError as exc:
        abort_problem(422, f"callback_url: {exc}", kind="invalid-request",
                      errors=field_errors([("callback_url", str(exc))]))


def admit(checks: CheckSource, submission: Submission, **kwargs: Any
          ) -> tuple[str | None, list[str]]:
    """Store ``checks`` for the current tenant and queue them as the store reports them stored
    (chunk by chunk for a large batch in Redis); 422/429 problems when a limit says no."""
    cfg = current_app.config
    who = tenant()
    count = len(checks)
    max_urgent = int(tenant_limit(cfg, who, "max_urgent"))
    if submission.priority == "urgent" and count > max_urgent:
        abort_problem(422, f"priority: {count} urgent checks at once; a tenant may have at most "
                           f"{max_urgent} unfinished urgent checks (send the rest as normal)",
                      kind="invalid-request", errors=field_errors(
                          [("priority", f"at most {max_urgent} urgent checks")]))
    window = float(cfg["BALLAST_RATE_WINDOW_S"])
    rate = int(tenant_limit(cfg, who, "check_rate_limit"))
    if count > rate:
        abort_problem(422, f"{count} checks at once; the limit is {rate} checks per "
                           f"{window:g} s", kind="invalid-request",
                      errors=field_errors([("variants", f"at most {rate} per request")]))
    wait = access_store().count_checks(who, window, rate, count)
    if wait > 0:
        abort_problem(429, f"more than {rate} checks created in {window:g} s; slow down",
                      kind="rate-limited", headers={"Retry-After": retry_after(wait)})
    enqueue = current_app.extensions["ballast"]["enqueue"]

    def queue(ids: list[str]) -> None:
        enqueue(ids, tenant=who, priority=submission.priority)

    try:
        created = check_store().create_checks(
            who, checks, max_unfinished=int(tenant_limit(cfg, who, "max_unfinished")),
            max_urgent=max_urgent, submission=submission, on_stored=queue, **kwargs)
    except UrgentQuotaExceededError as exc:
        access_store().count_checks(who, window, rate, -count)
        abort_problem(429, f"too many unfinished urgent checks: {exc}; wait, or send them as "
                           "normal", kind="too-many-urgent",
                      headers={"Retry-After": retry_after(30)})
    except BaseException:
        access_store().count_checks(who, window, rate, -count)
        raise
    SUBMITTED.labels(submission.priority).inc(len(created[1]))
    log.info("accepted %d check(s)", len(created[1]),
             extra={"tenant": who, "batch_id": created[0], "priority": submission.priority})
    return created


def submission(priority: str = "normal", callback_url: str | None = None) -> Submission:
    """How the current request's checks are queued (with its request id)."""
    return Submission(priority=priority,  # type: ignore[arg-type]
                      request_id=getattr(g, "request_id", None),
                      callback_url=checked_callback(callback_url))


def withdraw_cancelled(check_ids: list[str]) -> None:
    """Take the current tenant's cancelled checks out of its queue (best effort)."""
    try:
        current_app.extensions["ballast"]["withdraw"](tenant(), check_ids)
    except Exception as exc:  # a message left behind finds its check cancelled
        log.warning("could not withdraw %d cancelled check(s): %s", len(check_ids), exc)
