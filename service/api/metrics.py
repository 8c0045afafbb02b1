"""``GET /metrics``: Prometheus metrics for operators (``workers.metrics``).

It needs ``Authorization: Bearer <BALLAST_METRICS_TOKEN>``; without that setting it answers 404.
A tenant's API token gets 403 (it is known, but it is not the operators'); no token or another
one gets 401. Not part of the OpenAPI document (it is not the tenants' API).
"""

from __future__ import annotations

import hmac

from flask import Blueprint, Response, current_app, request

from service.api.tenancy import BEARER_CHALLENGE, access_store, check_store
from service.auth import tenant_of
from service.problems import abort_problem

blp = Blueprint("metrics", __name__)


@blp.route("/metrics", methods=["GET"])
def metrics() -> Response:
    expected = current_app.config.get("BALLAST_METRICS_TOKEN")
    if not expected:
        abort_problem(404, "metrics are not enabled here (set BALLAST_METRICS_TOKEN)",
                      kind="not-found")
    scheme, _, given = request.headers.get("Authorization", "").partition(" ")
    given = given.strip()
    if scheme.lower() != "bearer" or not hmac.compare_digest(given.encode(), expected.encode()):
        if scheme.lower() == "bearer" and given and tenant_of(access_store(), given):
            abort_problem(403, "a tenant's token cannot read the metrics", kind="forbidden")
        abort_problem(401, "send the operators' metrics token as a bearer token",
                      kind="unauthenticated", headers={"WWW-Authenticate": BEARER_CHALLENGE})
    from workers.metrics import CONTENT_TYPE, TenantGauges, exposition

    store = check_store()
    gauges = TenantGauges(store.tenants, current_app.extensions["ballast"]["queue_size"],
                          store.count_unfinished)
    return Response(exposition(gauges), mimetype=None, content_type=CONTENT_TYPE)
