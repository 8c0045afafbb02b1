"""POST/GET/DELETE /v1/checks with the Flask test client.

Sources: RFC 9110 §15.3.3 (202 Accepted), §10.2.2 (Location), §10.2.3 (Retry-After); RFC 9457
(problem details); the IETF HTTPAPI draft "The Idempotency-Key HTTP Header Field" (same key and
payload → same result, other payload → 422, request still in flight → 409); the verdict must be
the engine's own output for the stored request (service issue: "exactly as the engine produces it").
"""

from __future__ import annotations

import hashlib
import json
import re

from service.runner import load_request
from tests.api_fixtures import run_worker, tiny_request
from tests.request_equality import assert_same_request

PROBLEM = "application/problem+json"
RFC3339 = re.compile(r"^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{3}Z$")


def test_submit_answers_202_with_location_and_retry_after(client, auth, fake_queue):
    response = client.post("/v1/checks", json=tiny_request(), headers=auth)
    assert response.status_code == 202
    body = response.get_json()
    assert body["status"] == "queued"
    assert response.headers["Location"] == f"/v1/checks/{body['id']}" == body["location"]
    assert int(response.headers["Retry-After"]) >= 1
    assert fake_queue.enqueued == [body["id"]]  # only the id crosses the queue


def test_queued_check_reads_back(client, auth):
    check_id = client.post("/v1/checks", json=tiny_request(), headers=auth).get_json()["id"]
    response = client.get(f"/v1/checks/{check_id}", headers=auth)
    body = response.get_json()
    assert body["status"] == "queued" and body["attempts"] == 0
    assert int(response.headers["Retry-After"]) >= 1  # a polling hint while unfinished
    assert body["verdict"] is None and body["reason"] is None and body["batch_id"] is None
    assert RFC3339.match(body["created_at"]) and body["started_at"] is None


def test_done_check_returns_the_engine_verdict_unchanged(client, auth, api_stores):
    request = tiny_request()
    check_id = client.post("/v1/checks", json=request, headers=auth).get_json()["id"]
    # the store keeps the request as validated: it reads back as the schema's own request
    assert_same_request(load_request(api_stores.checks.get_request(check_id)),
                        load_request(request))
    (verdict,) = run_worker(api_stores.checks, [check_id])
    response = client.get(f"/v1/checks/{check_id}", headers=auth)
    body = response.get_json()
    assert body["status"] == "done" and body["attempts"] == 1
    assert "Retry-After" not in response.headers
    assert body["verdict"] == verdict
    # same member order as the engine wrote it (the API must not re-sort the document)
    served = json.loads(response.get_data(as_text=True))["verdict"]
    assert json.dumps(served) == json.dumps(verdict)
    assert RFC3339.match(body["finished_at"])


def test_failed_check_says_why(client, auth, api_stores):
    check_id = client.post("/v1/checks", json=tiny_request(), headers=auth).get_json()["id"]
    api_stores.checks.claim(check_id, lease_s=60, max_attempts=3)
    api_stores.checks.fail(check_id, "soft time limit of 300 s exceeded")
    body = client.get(f"/v1/checks/{check_id}", headers=auth).get_json()
    assert body["status"] == "failed"
    assert body["reason"] == "soft time limit of 300 s exceeded" and body["verdict"] is None


def test_delete_cancels_unfinished_and_keeps_finished(client, auth, api_stores):
    queued = client.post("/v1/checks", json=tiny_request(), headers=auth).get_json()["id"]
    done = client.post("/v1/checks", json=tiny_request(), headers=auth).get_json()["id"]
    run_worker(api_stores.checks, [done])
    response = client.delete(f"/v1/checks/{queued}", headers=auth)
    assert response.status_code == 200 and response.get_json()["status"] == "cancelled"
    assert client.delete(f"/v1/checks/{done}", headers=auth).get_json()["status"] == "done"
    assert api_stores.checks.claim(queued, lease_s=60, max_attempts=3) is None  # never runs now


def test_another_tenants_check_is_not_found(client, auth, rival_auth):
    check_id = client.post("/v1/checks", json=tiny_request(), headers=auth).get_json()["id"]
    for method in (client.get, client.delete):
        response = method(f"/v1/checks/{check_id}", headers=rival_auth)
        assert response.status_code == 404 and response.mimetype == PROBLEM
    assert client.get(f"/v1/checks/{check_id}", headers=auth).get_json()["status"] == "queued"
    assert client.get("/v1/checks/chk_unknown", headers=auth).status_code == 404


def test_idempotent_retry_returns_the_same_check(client, auth, fake_queue):
    headers = {**auth, "Idempotency-Key": "flow-42/variant-7"}
    first = client.post("/v1/checks", json=tiny_request(), headers=headers)
    again = client.post("/v1/checks", json=tiny_request(), headers=headers)
    assert first.status_code == again.status_code == 202
    assert first.get_json()["id"] == again.get_json()["id"]
    assert first.headers["Location"] == again.headers["Location"]
    assert len(fake_queue.enqueued) == 1  # stored and queued once
    other = tiny_request()
    other["devices"][0]["gm_s"] = 0.06
    reused = client.post("/v1/checks", json=other, headers=headers)
    assert reused.status_code == 422 and reused.mimetype == PROBLEM
    # the key belongs to the tenant: another tenant may use the same key
    assert client.post("/v1/checks", json=other, headers={**auth, "Idempotency-Key": "k2"}
                       ).status_code == 202


def test_idempotency_key_still_being_accepted_answers_409(client, auth, api_stores):
    body = json.dumps(tiny_request()).encode()
    # a first request holding the key (fingerprint: SHA-256 of the body) is still storing
    assert api_stores.access.idempotency_begin("acme", "slow", hashlib.sha256(body).hexdigest(), 60
                                       )[0] == "new"
    response = client.post("/v1/checks", data=body, content_type="application/json",
                           headers={**auth, "Idempotency-Key": "slow"})
    assert response.status_code == 409 and response.mimetype == PROBLEM


def test_invalid_request_names_the_field(client, auth, fake_queue, api_stores):
    bad = tiny_request()
    bad["frequency_hz"] = [1e8, 3e9, 2e9, 4e9]  # not increasing (the request contract)
    response = client.post("/v1/checks", json=bad, headers=auth)
    problem = response.get_json()
    assert response.status_code == 422 and response.mimetype == PROBLEM
    assert {"type", "title", "status", "detail"} <= set(problem) and problem["status"] == 422
    assert [e["field"] for e in problem["errors"]] == ["frequency_hz"]
    assert problem["errors"][0]["pointer"] == "#/frequency_hz"
    assert fake_queue.enqueued == [] and api_stores.checks.count_unfinished("acme") == 0


def test_unknown_field_is_rejected(client, auth):
    bad = {**tiny_request(), "colour": "blue"}
    problem = client.post("/v1/checks", json=bad, headers=auth).get_json()
    assert problem["status"] == 422
    assert [e["field"] for e in problem["errors"]] == ["colour"]


def test_body_that_is_not_a_json_object(client, auth):
    malformed = client.post("/v1/checks", data="{", content_type="application/json",
                            headers=auth)
    assert malformed.status_code == 400 and malformed.mimetype == PROBLEM
    nan = client.post("/v1/checks", data='{"frequency_hz": [NaN]}',
                      content_type="application/json", headers=auth)
    assert nan.status_code == 400  # NaN is not JSON (RFC 8259 §6)
    array = client.post("/v1/checks", json=[1, 2], headers=auth)
    assert array.status_code == 422 and array.get_json()["errors"][0]["field"] == "body"
    text = client.post("/v1/checks", data="x", content_type="text/plain", headers=auth)
    assert text.status_code == 415 and text.mimetype == PROBLEM
