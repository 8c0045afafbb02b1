"""How the API queues checks: ``priority`` per check and per batch, the per-tenant urgent bound,
rate limits that count checks created, batch ``callback_url`` targets, and cancelled checks taken
out of the queue.

The contract is issue 10's; the address classes refused for callbacks are RFC 6890's
special-purpose ranges (loopback 127/8, link-local 169.254/16, private 10/8, 172.16/12,
192.168/16) as Python's ``ipaddress`` classifies them.
"""

from __future__ import annotations

import pytest

from service.app import create_app
from tests.api_fixtures import api_config, tiny_request

PROBLEM = "application/problem+json"


def _batch(n: int, **envelope) -> dict:
    request = tiny_request()
    shared = {k: request[k] for k in ("frequency_hz", "ports", "devices", "parameters")}
    return {"map": shared, "variants": [{"data": request["data"]}] * n, **envelope}


def _client(api_stores, fake_queue, **settings):
    return create_app(api_config(api_stores, fake_queue, **settings)).test_client()


def test_a_check_takes_its_priority_to_the_queue(client, auth, api_stores, fake_queue):
    urgent = client.post("/v1/checks", json={**tiny_request(), "priority": "urgent"},
                         headers=auth)
    normal = client.post("/v1/checks", json=tiny_request(), headers=auth)
    assert urgent.status_code == normal.status_code == 202
    assert fake_queue.routes == [{"tenant": "acme", "priority": "urgent"},
                                 {"tenant": "acme", "priority": "normal"}]
    got = client.get(urgent.headers["Location"], headers=auth).get_json()
    assert got["priority"] == "urgent"
    assert api_stores.checks.get_check("acme", normal.get_json()["id"]).priority == "normal"


def test_an_unknown_priority_is_refused_naming_the_field(client, auth, fake_queue):
    response = client.post("/v1/checks", json={**tiny_request(), "priority": "asap"},
                           headers=auth)
    assert response.status_code == 422 and response.mimetype == PROBLEM
    assert [e["field"] for e in response.get_json()["errors"]] == ["priority"]
    batch = client.post("/v1/batches", json=_batch(2, priority="asap"), headers=auth)
    assert batch.status_code == 422
    assert "priority" in [e["field"] for e in batch.get_json()["errors"]]
    assert fake_queue.enqueued == []


def test_urgent_is_bounded_per_tenant(api_stores, fake_queue, auth, rival_auth):
    client = _client(api_stores, fake_queue, BALLAST_MAX_URGENT=3)
    urgent = {**tiny_request(), "priority": "urgent"}
    assert [client.post("/v1/checks", json=urgent, headers=auth).status_code
            for _ in range(3)] == [202, 202, 202]
    over = client.post("/v1/checks", json=urgent, headers=auth)
    assert over.status_code == 429 and over.headers["Retry-After"]
    assert over.get_json()["type"].endswith("too-many-urgent")
    assert client.post("/v1/checks", json=tiny_request(), headers=auth).status_code == 202
    assert client.post("/v1/checks", json=urgent, headers=rival_auth).status_code == 202
    too_big = client.post("/v1/batches", json=_batch(4, priority="urgent"), headers=rival_auth)
    assert too_big.status_code == 422
    assert [e["field"] for e in too_big.get_json()["errors"]] == ["priority"]


def test_rate_limit_counts_checks_created(api_stores, fake_queue, auth):
    client = _client(api_stores, fake_queue, BALLAST_CHECK_RATE_LIMIT=10)
    assert client.post("/v1/batches", json=_batch(6), headers=auth).status_code == 202
    over = client.post("/v1/batches", json=_batch(5), headers=auth)  # 11 > 10 in one window
    assert over.status_code == 429 and over.get_json()["type"].endswith("rate-limited")
    assert int(over.headers["Retry-After"]) >= 1
    assert client.post("/v1/batches", json=_batch(4), headers=auth).status_code == 202
    assert client.post("/v1/checks", json=tiny_request(), headers=auth).status_code == 429
    assert len(fake_queue.enqueued) == 10
    never = client.post("/v1/batches", json=_batch(11), headers=auth)  # larger than the limit
    assert never.status_code == 422


def test_a_refused_batch_gives_its_checks_back(api_stores, fake_queue, auth):
    client = _client(api_stores, fake_queue, BALLAST_CHECK_RATE_LIMIT=4)
    bad = _batch(3)
    bad["variants"][2] = {"data": {"re": [[[0.0]]], "im": [[[0.0]]]}}  # wrong shape: 422
    assert client.post("/v1/batches", json=bad, headers=auth).status_code == 422
    assert client.post("/v1/batches", json=_batch(4), headers=auth).status_code == 202


@pytest.mark.parametrize("url", [
    "http://127.0.0.1:9/hook",          # loopback (RFC 6890: 127.0.0.0/8)
    "http://[::1]/hook",                # loopback (::1/128)
    "http://169.254.169.254/latest",    # link-local (169.254.0.0/16)
    "https://10.1.2.3/hook",            # private (10.0.0.0/8)
    "https://192.168.0.7/hook",         # private (192.168.0.0/16)
    "http://localhost:8080/hook",       # resolves to loopback
])
def test_callbacks_to_private_targets_are_refused(client, auth, fake_queue, url):
    response = client.post("/v1/batches", json=_batch(1, callback_url=url), headers=auth)
    assert response.status_code == 422 and response.mimetype == PROBLEM
    assert [e["field"] for e in response.get_json()["errors"]] == ["callback_url"]
    assert fake_queue.enqueued == []


@pytest.mark.parametrize("url", ["ftp://hooks.example/x", "hooks.example/x", "http://"])
def test_a_callback_url_must_be_http(client, auth, url):
    response = client.post("/v1/batches", json=_batch(1, callback_url=url), headers=auth)
    assert response.status_code == 422
    assert "callback_url" in [e["field"] for e in response.get_json()["errors"]]


def test_an_operator_may_allow_private_callback_targets(api_stores, fake_queue, auth):
    client = _client(api_stores, fake_queue, BALLAST_CALLBACK_ALLOW_PRIVATE=True)
    url = "http://127.0.0.1:9/hook"
    response = client.post("/v1/batches", json=_batch(2, callback_url=url), headers=auth)
    assert response.status_code == 202
    batch = client.get(response.headers["Location"], headers=auth).get_json()
    assert batch["callback_url"] == url and batch["callback_status"] == "waiting"


def test_cancelling_takes_the_checks_out_of_the_queue(client, auth, fake_queue):
    accepted = client.post("/v1/batches", json=_batch(3), headers=auth).get_json()
    assert client.delete(accepted["location"], headers=auth).status_code == 200
    assert fake_queue.withdrawn == [("acme", accepted["check_ids"])]
    check = client.post("/v1/checks", json=tiny_request(), headers=auth).get_json()
    client.delete(check["location"], headers=auth)
    assert fake_queue.withdrawn[-1] == ("acme", [check["id"]])
