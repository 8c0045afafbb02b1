"""The check task: thin and idempotent. It receives a check id and nothing else.

claim (compare-and-set, attempts += 1, lease) → read the stored request (validated by the API when
it was accepted: only decoded here, ``workers.intake``) → run the engine → complete.
A duplicate or late message finds the check already claimed or final and does nothing; a check
that has used up its attempts is marked ``failed`` by the claim itself, so a check that kills its
worker every time stops after ``BALLAST_MAX_ATTEMPTS`` deliveries. Store calls ride out a short
Redis outage: the worker's store client retries them (redis-py's ``Retry``, see
``workers.store_access``); should one still fail, the check stays ``running`` until its lease
expires and the reconciler queues it again.
"""

from __future__ import annotations

import logging
import os
import time
from typing import Any

from billiard.einfo import ExceptionWithTraceback
from billiard.exceptions import SoftTimeLimitExceeded, Terminated, WorkerLostError
from celery.worker.request import Request

from workers.celery_app import app, config
from workers.collector import collector_paused
from workers.engine import run_check as run_engine  # loaded before the worker forks its pool
from workers.heartbeat import instance
from workers.intake import StoredRequestError, decode_stored
from workers.logs import REQUEST_ID
from workers.metrics import ENGINE_SECONDS, FAILED, FINISHED, REDELIVERED
from workers.runtime_config import RUN_CHECK_TASK
from workers.store import CheckStore
from workers.store_access import process_stores

log = logging.getLogger("ballast.worker")


def _test_hooks(label: str | None) -> None:
    """Fault injection for the reliability tests; inert unless ``BALLAST_TESTING=1``.

    BALLAST_TEST_CRASH_LABEL: a check with this label kills its worker process (``os._exit``).
    BALLAST_TEST_PAUSE_LABEL / BALLAST_TEST_PAUSE_S: a check with this label sleeps first, so
    a test can kill the worker while the check is running or exceed the time limits.
    """
    if not config.testing or label is None:
        return
    if label == os.environ.get("BALLAST_TEST_CRASH_LABEL"):
        log.warning("test hook: crashing on check labelled %s", label)
        os._exit(70)
    if label == os.environ.get("BALLAST_TEST_PAUSE_LABEL"):
        pause_s = float(os.environ.get("BALLAST_TEST_PAUSE_S", "5"))
        if os.environ.get("BALLAST_TEST_PAUSE_STUBBORN") == "1":
            end = time.monotonic() + pause_s  # ignores the soft limit: only the hard one stops it
            while time.monotonic() < end:
                try:
                    time.sleep(max(0.0, end - time.monotonic()))
                except SoftTimeLimitExceeded:
                    continue
        else:
            time.sleep(pause_s)


class CheckRequest(Request):
    """Celery's request object, plus two hooks that run in the worker's main process:

    - a hard time-out marks the check ``failed`` with the reason (the hard limit kills the pool
      process, so the task cannot record it);
    - a pool process that died mid-check (``WorkerLostError``) releases the check's lease before
      Celery puts the message back (``reject_on_worker_lost``), so the redelivery claims it at
      once: a check that kills its worker every time ends ``failed`` after its attempts within
      seconds, not one lease (hard limit + margin) per attempt;
    - so does a check that Celery's cold shutdown cancelled (``Terminated``; ``ballast serve``
      asks for one when running checks outlast its warm shutdown): its unacknowledged message
      goes back on the queue and the next start claims it at once.
    """

    def on_failure(self, exc_info: Any, send_failed_event: bool = True,
                   return_ok: bool = False) -> None:
        exc = exc_info.exception
        if isinstance(exc, ExceptionWithTraceback):
            exc = exc.exc
        if isinstance(exc, WorkerLostError | Terminated) and self.args:
            check_id = str(self.args[0])
            try:
                process_stores().checks.release(check_id)
            except Exception:  # the lease then runs out and the reconciler re-queues it
                log.exception("could not release the lease of %s", check_id)
        super().on_failure(exc_info, send_failed_event=send_failed_event, return_ok=return_ok)

    def on_timeout(self, soft: bool, timeout: float) -> None:
        super().on_timeout(soft, timeout)
        if soft or not self.args:
            return
        check_id = str(self.args[0])
        reason = f"time limit exceeded: the check ran longer than {timeout:g} s (hard limit)"
        try:
            if process_stores().checks.fail(check_id, reason):
                FAILED.inc()
        except Exception:  # the lease expiry path still ends the check
            log.exception("could not record the hard time-out of %s", check_id)


@app.task(
    name=RUN_CHECK_TASK,
    bind=True,
    Request=CheckRequest,
    acks_late=True,
    reject_on_worker_lost=True,
    ignore_result=True,
    soft_time_limit=config.soft_time_limit_s,
    time_limit=config.hard_time_limit_s,
)
def run_check(self: Any, check_id: str) -> str:
    """Run one stored check; returns what happened (for the worker log): done/failed/skipped.

    The claim names this worker instance (``self.request.hostname`` and the pid of its main
    process, the pool process's parent), so that the reconciler can hand the check on if that
    instance's heartbeat stops. The cyclic garbage collector is paused for the
    task: the request and the engine's intermediate objects are freed by reference counting when
    the task ends, unscanned (``workers.collector.collector_paused``).
    """
    with collector_paused():
        hostname = getattr(self.request, "hostname", None)
        return _run_check(check_id, instance(hostname, os.getppid()) if hostname else None)


def _run_check(check_id: str, worker: str | None = None) -> str:
    store = process_stores().checks
    record = store.claim(check_id, config.lease_s, config.max_attempts, worker=worker)
    if record is None or record.status != "running":
        return "skipped"
    if record.attempts > 1:
        REDELIVERED.inc()
    token = REQUEST_ID.set(record.request_id)  # the request that sent it, in every line below
    fields = {"check_id": check_id, "tenant": record.tenant, "attempt": record.attempts,
              "priority": record.priority, "batch_id": record.batch_id}
    try:
        log.info("check started", extra=fields)
        outcome = _run_claimed(store, check_id, record.label, fields)
        log.info("check %s", outcome, extra=fields)
        return outcome
    finally:
        REQUEST_ID.reset(token)


def _fail(store: CheckStore, check_id: str, reason: str) -> str:
    if store.fail(check_id, reason):
        FAILED.inc()
    return "failed"


def _run_claimed(store: CheckStore, check_id: str, label: str | None,
                 fields: dict[str, Any]) -> str:
    stored = store.get_request(check_id)
    if stored is None:
        return _fail(store, check_id, "the check's request is missing from the store")
    started = time.perf_counter()
    try:
        _test_hooks(label)
        verdict = run_engine(decode_stored(stored)).to_dict()
    except SoftTimeLimitExceeded:
        return _fail(store, check_id, "time limit exceeded: the check ran longer than "
                                      f"{config.soft_time_limit_s:g} s")
    except StoredRequestError as exc:  # a damaged record, or one stored by another version
        return _fail(store, check_id, f"the stored request cannot be read: {exc}")
    except ValueError as exc:  # the engine's InputError and TouchstoneError
        return _fail(store, check_id, f"invalid check request: {exc}")
    except Exception as exc:
        log.exception("engine error on check %s", check_id, extra=fields)
        return _fail(store, check_id, f"engine error: {type(exc).__name__}: {exc}")
    seconds = time.perf_counter() - started
    ENGINE_SECONDS.observe(seconds)
    fields.update(verdict=verdict.get("verdict"), engine_seconds=round(seconds, 4))
    if not store.complete(check_id, verdict):
        return "skipped"  # cancelled (or handed on) while it ran
    FINISHED.labels(str(verdict.get("verdict"))).inc()
    return "done"
