"""Batch callbacks: signed by the open Standard Webhooks scheme, delivered at least once with
retries, never redirected, never to a private address unless allowed.

Oracle for the signature: the Standard Webhooks specification 1.0.0 ("Signature scheme",
"Webhook headers"): HMAC-SHA256 (RFC 2104, Python's ``hmac``) over
``{webhook-id}.{webhook-timestamp}.{body}`` with the base64-decoded part of ``whsec_…``,
base64-encoded and prefixed ``v1,``, computed here independently of ``workers.callbacks``. The
receiver is a real HTTP server on loopback (allowed by the test configuration).
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import json
import time

import pytest

from service.app import create_app
from tests.api_fixtures import api_config, run_worker, tiny_request
from tests.support.webhook_receiver import Receiver
from workers.callbacks.sender import CallbackSender
from workers.callbacks.signing import verify


def _spec_signature(secret: str, message_id: str, stamp: str, body: bytes) -> str:
    key = base64.b64decode(secret.removeprefix("whsec_"))
    mac = hmac.new(key, f"{message_id}.{stamp}.".encode() + body, hashlib.sha256).digest()
    return "v1," + base64.b64encode(mac).decode()


def _finished_batch(client, auth, api_stores, url: str) -> str:
    request = tiny_request()
    body = {"map": {k: request[k] for k in ("frequency_hz", "ports", "devices", "parameters")},
            "variants": [{"data": request["data"], "label": "a"},
                         {"data": request["data"], "label": "b"}],
            "callback_url": url}
    accepted = client.post("/v1/batches", json=body, headers=auth)
    assert accepted.status_code == 202, accepted.get_json()
    run_worker(api_stores.checks, accepted.get_json()["check_ids"])
    return accepted.get_json()["id"]


@pytest.fixture
def allowed_client(api_stores, fake_queue):
    return create_app(api_config(api_stores, fake_queue,
                                 BALLAST_CALLBACK_ALLOW_PRIVATE=True)).test_client()


def test_receiver_gets_one_correctly_signed_call(allowed_client, auth, api_stores):
    with Receiver() as receiver:
        batch_id = _finished_batch(allowed_client, auth, api_stores, receiver.url)
        sender = CallbackSender(api_stores.checks, api_stores.access, allow_private=True)
        assert sender.tick() == 1
        assert sender.tick() == 0  # delivered: not sent again
    ((path, headers, body),) = receiver.calls
    assert path == "/hooks/ballast"
    secret = allowed_client.get("/v1/callbacks/secret", headers=auth).get_json()["secret"]
    assert headers["webhook-id"] == f"msg_{batch_id}"
    assert abs(int(headers["webhook-timestamp"]) - time.time()) < 60
    assert headers["webhook-signature"] == _spec_signature(
        secret, headers["webhook-id"], headers["webhook-timestamp"], body)
    assert verify(secret, headers, body, time.time())
    event = json.loads(body)
    assert event["type"] == "batch.finished" and event["data"]["id"] == batch_id
    assert event["data"]["counts_by_status"] == {"done": 2}
    shown = allowed_client.get(f"/v1/batches/{batch_id}", headers=auth).get_json()
    assert shown["callback_status"] == "delivered"


def test_a_tampered_call_fails_verification(allowed_client, auth, api_stores):
    with Receiver() as receiver:
        _finished_batch(allowed_client, auth, api_stores, receiver.url)
        CallbackSender(api_stores.checks, api_stores.access, allow_private=True).tick()
    ((_, headers, body),) = receiver.calls
    secret = allowed_client.get("/v1/callbacks/secret", headers=auth).get_json()["secret"]
    assert verify(secret, headers, body, time.time())
    assert not verify(secret, headers, body.replace(b'"done":2', b'"done":3'), time.time())
    forged = {**headers, "webhook-signature": "v1," + base64.b64encode(b"x" * 32).decode()}
    assert not verify(secret, forged, body, time.time())
    replayed = {**headers, "webhook-timestamp": str(int(headers["webhook-timestamp"]) - 3600)}
    assert not verify(secret, replayed, body, time.time())
    other = allowed_client.post("/v1/callbacks/secret", headers=auth).get_json()["secret"]
    assert other != secret and not verify(other, headers, body, time.time())


def test_failed_deliveries_are_retried_and_redirects_not_followed(allowed_client, auth,
                                                                  api_stores):
    answers = [(503, {}), (302, {"Location": "/elsewhere"}), (200, {})]
    with Receiver(answers) as receiver:
        batch_id = _finished_batch(allowed_client, auth, api_stores, receiver.url)
        sender = CallbackSender(api_stores.checks, api_stores.access, allow_private=True,
                                delays=(0.05, 0.05, 0.05))
        for _ in range(3):
            sender.tick()
            time.sleep(0.1)
    assert [path for path, _, _ in receiver.calls] == ["/hooks/ballast"] * 3
    assert len({h["webhook-id"] for _, h, _ in receiver.calls}) == 1  # one id for every attempt
    assert api_stores.checks.get_batch("acme", batch_id).callback_status == "delivered"


def test_rotation_signs_with_both_secrets_during_the_grace(allowed_client, auth, api_stores):
    first = allowed_client.get("/v1/callbacks/secret", headers=auth).get_json()["secret"]
    rotated = allowed_client.post("/v1/callbacks/secret", headers=auth).get_json()
    assert rotated["previous"] == first and rotated["secret"] != first
    with Receiver() as receiver:
        _finished_batch(allowed_client, auth, api_stores, receiver.url)
        CallbackSender(api_stores.checks, api_stores.access, allow_private=True).tick()
    ((_, headers, body),) = receiver.calls
    assert len(headers["webhook-signature"].split()) == 2
    assert verify(first, headers, body, time.time())
    assert verify(rotated["secret"], headers, body, time.time())


def test_a_private_target_is_refused_at_delivery_too(allowed_client, auth, api_stores):
    """Accepted while the operator allowed it, then the setting is off: the sender checks the
    target before each attempt and never calls it."""
    with Receiver() as receiver:
        batch_id = _finished_batch(allowed_client, auth, api_stores, receiver.url)
        sender = CallbackSender(api_stores.checks, api_stores.access, allow_private=False,
                                delays=(0.01,))
        sender.tick()
        time.sleep(0.05)
        sender.tick()
    assert receiver.calls == []
    assert api_stores.checks.get_batch("acme", batch_id).callback_status == "failed"


def test_secrets_belong_to_their_tenant(client, auth, rival_auth):
    mine = client.get("/v1/callbacks/secret", headers=auth).get_json()["secret"]
    theirs = client.get("/v1/callbacks/secret", headers=rival_auth).get_json()["secret"]
    assert mine.startswith("whsec_") and theirs.startswith("whsec_") and mine != theirs
    assert len(base64.b64decode(mine[6:])) == 32  # 24-64 random bytes (the specification)
    assert client.get("/v1/callbacks/secret").status_code == 401
