"""/v1/callbacks/secret: the tenant's secret for verifying batch callbacks.

``GET`` shows the current secret (made on first use); ``POST`` rotates it: the new secret signs
from now on and the previous one also signs for ``BALLAST_CALLBACK_SECRET_GRACE_S`` (24 h by
default), so that receivers can switch without missing a delivery (Standard Webhooks: several
signatures in ``webhook-signature``). Only the tenant's own token sees its secret.
"""

from __future__ import annotations

import time
from typing import Any

from flask import current_app
from flask_smorest import Blueprint

from service.api.common import document_errors
from service.api.tenancy import access_store, authenticate, tenant
from service.schemas.api import WebhookSecretSchema
from workers.callbacks.sender import SECRET_GRACE_S, tenant_secrets
from workers.callbacks.signing import new_secret

blp = Blueprint("callbacks", __name__, url_prefix="/v1/callbacks",
                description="Verifying batch callbacks")
blp.before_request(authenticate)


def _view(found: tuple[str, ...]) -> dict[str, Any]:
    return {"secret": found[0], "previous": found[1] if len(found) > 1 else None,
            "scheme": "Standard Webhooks v1 (HMAC-SHA256 over webhook-id.webhook-timestamp.body)"}


@blp.route("/secret", methods=["GET"])
@blp.doc(operationId="getCallbackSecret")
@blp.response(200, WebhookSecretSchema)
@document_errors(blp, 401, 429)
def get_secret():
    """The secret that signs this tenant's batch callbacks (made on first use)."""
    return _view(tenant_secrets(access_store(), tenant(), time.time()))


@blp.route("/secret", methods=["POST"])
@blp.doc(operationId="rotateCallbackSecret")
@blp.response(200, WebhookSecretSchema, description="The new secret (the previous one still "
                                                   "signs during the grace period)")
@document_errors(blp, 401, 429)
def rotate_secret():
    """Make a new signing secret; the previous one keeps signing for the grace period."""
    now = time.time()
    grace = float(current_app.config.get("BALLAST_CALLBACK_SECRET_GRACE_S", SECRET_GRACE_S))
    tenant_secrets(access_store(), tenant(), now)  # a first secret, if none, becomes previous
    access_store().put_webhook_secret(tenant(), new_secret(), now, grace)
    return _view(access_store().webhook_secrets(tenant(), now))
