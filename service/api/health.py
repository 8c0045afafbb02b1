"""/healthz (the process answers) and /readyz (store, queue and a worker available)."""

from __future__ import annotations

import logging

from flask import current_app
from flask_smorest import Blueprint

from service.api.tenancy import check_store, queue_function
from service.schemas.api import HealthSchema, ReadySchema

log = logging.getLogger("ballast.api")

blp = Blueprint("health", __name__, description="Liveness and readiness (no token needed)")


def _probe(name: str) -> bool:
    try:
        return bool(queue_function(name)())
    except Exception as exc:  # a probe that cannot answer means "not ready"
        log.warning("readiness probe %s failed: %s", name, exc)
        return False


@blp.route("/healthz", methods=["GET"])
@blp.doc(operationId="health", security=[])
@blp.response(200, HealthSchema)
def healthz():
    """The API process is up."""
    return {"status": "ok"}


@blp.route("/readyz", methods=["GET"])
@blp.doc(operationId="ready", security=[])
@blp.response(200, ReadySchema, description="Ready to accept and run checks")
@blp.alt_response(503, schema=ReadySchema, description="Not ready (see which part is missing)",
                  headers={"Retry-After": {"schema": {"type": "integer"}}})
def readyz():
    """Ready when the store and the queue answer and at least one worker is alive."""
    store_ok = check_store().ping()
    queue_ok = _probe("queue_reachable")
    workers_ok = _probe("workers_alive")
    ready = store_ok and queue_ok and workers_ok
    body = {"status": "ready" if ready else "unready", "store": store_ok, "queue": queue_ok,
            "workers": workers_ok}
    if ready:
        return body
    retry = str(current_app.config["BALLAST_READY_RETRY_AFTER_S"])
    return body, 503, {"Retry-After": retry}
