"""HTTP semantics shared by every endpoint: problem details, 401/404/405/411/413/415/429, health.

Sources: RFC 9457 (problem details: type, title, status, detail; media type
application/problem+json), RFC 9110 §15.5.6 (405 must carry Allow), §15.5.12 (411 Length
Required), §15.5.14 (413 Content Too Large), §15.5.16 (415), RFC 6750 §3 (401 with
WWW-Authenticate: Bearer, error="invalid_token"), RFC 6585 §4 (429 with Retry-After),
RFC 9112 §7.1 (chunked transfer coding).
"""

from __future__ import annotations

import io
import json

import pytest

from service.app import create_app
from service.auth import create_token
from tests.api_fixtures import api_config, tiny_request

PROBLEM = "application/problem+json"


def _is_problem(response, status: int) -> dict:
    assert response.status_code == status
    assert response.mimetype == PROBLEM
    body = response.get_json()
    assert {"type", "title", "status", "detail"} <= set(body) and body["status"] == status
    return body


def test_405_keeps_allow(client, auth):
    response = client.put("/v1/checks", json={}, headers=auth)
    _is_problem(response, 405)
    assert set(response.headers["Allow"].replace(" ", "").split(",")) >= {"POST"}
    response = client.post("/v1/checks/chk_x", headers=auth)
    _is_problem(response, 405)
    assert {"GET", "DELETE"} <= set(response.headers["Allow"].replace(" ", "").split(","))


def test_unknown_path_is_a_problem(client, auth):
    _is_problem(client.get("/v2/nothing", headers=auth), 404)


def test_401_without_or_with_a_bad_token(client, api_stores):
    missing = client.get("/v1/batches")
    _is_problem(missing, 401)
    assert missing.headers["WWW-Authenticate"].startswith("Bearer")
    wrong = client.get("/v1/batches", headers={"Authorization": "Bearer blst_" + "A" * 43})
    _is_problem(wrong, 401)
    assert 'error="invalid_token"' in wrong.headers["WWW-Authenticate"]
    basic = client.get("/v1/batches", headers={"Authorization": "Basic dXNlcjpwYXNz"})
    _is_problem(basic, 401)
    token = create_token(api_stores.access, "acme")
    assert client.get("/v1/batches", headers={"Authorization": f"Bearer {token}"}
                      ).status_code == 200
    from service.auth import hash_token

    api_stores.access.revoke_token(hash_token(token))
    _is_problem(client.get("/v1/batches", headers={"Authorization": f"Bearer {token}"}), 401)


@pytest.fixture
def small_app(api_stores, fake_queue):
    return create_app(api_config(api_stores, fake_queue, BALLAST_MAX_BODY_BYTES=4096))


def test_413_when_content_length_is_over_the_cap(small_app, auth):
    body = json.dumps({**tiny_request(), "pad": "x" * 5000})
    response = small_app.test_client().post("/v1/checks", data=body,
                                             content_type="application/json", headers=auth)
    _is_problem(response, 413)


def _chunked_environ(body: bytes, terminated: bool) -> dict:
    environ = {"wsgi.input": io.BytesIO(body), "HTTP_TRANSFER_ENCODING": "chunked"}
    if terminated:  # set by servers that de-chunk the body themselves (gunicorn does)
        environ["wsgi.input_terminated"] = True
    return environ


def test_chunked_body_over_the_cap_answers_413_not_a_truncated_parse(small_app, auth):
    body = json.dumps({**tiny_request(), "pad": "x" * 5000}).encode()
    response = small_app.test_client().post(
        "/v1/checks", content_type="application/json", headers=auth,
        environ_overrides=_chunked_environ(body, terminated=True))
    _is_problem(response, 413)


def test_chunked_body_under_the_cap_is_accepted(small_app, auth):
    body = json.dumps(tiny_request()).encode()
    response = small_app.test_client().post(
        "/v1/checks", content_type="application/json", headers=auth,
        environ_overrides=_chunked_environ(body, terminated=True))
    assert response.status_code == 202


def test_chunked_body_on_a_server_that_does_not_dechunk_answers_411(small_app, auth):
    body = json.dumps(tiny_request()).encode()
    response = small_app.test_client().post(
        "/v1/checks", content_type="application/json", headers=auth,
        environ_overrides=_chunked_environ(body, terminated=False))
    _is_problem(response, 411)


def test_rate_limit_answers_429_with_retry_after(api_stores, fake_queue, auth):
    app = create_app(api_config(api_stores, fake_queue, BALLAST_RATE_LIMIT=3,
                                BALLAST_RATE_WINDOW_S=3600.0))
    client = app.test_client()
    statuses = [client.get("/v1/batches", headers=auth).status_code for _ in range(4)]
    assert statuses == [200, 200, 200, 429]
    response = client.get("/v1/batches", headers=auth)
    _is_problem(response, 429)
    assert 1 <= int(response.headers["Retry-After"]) <= 3600


def test_unfinished_quota_answers_429(api_stores, fake_queue, auth):
    app = create_app(api_config(api_stores, fake_queue,
                                BALLAST_TENANT_LIMITS={"acme": {"max_unfinished": 3}}))
    client = app.test_client()
    batch = {"map": tiny_request(), "variants": [{"label": "a"}, {"label": "b"}]}
    assert client.post("/v1/batches", json=batch, headers=auth).status_code == 202
    response = client.post("/v1/batches", json=batch, headers=auth)
    _is_problem(response, 429)
    assert int(response.headers["Retry-After"]) >= 1
    assert client.post("/v1/checks", json=tiny_request(), headers=auth).status_code == 202
    _is_problem(client.post("/v1/checks", json=tiny_request(), headers=auth), 429)


def test_healthz_and_readyz(client, fake_queue, api_stores):
    assert client.get("/healthz").get_json() == {"status": "ok"}
    ready = client.get("/readyz")
    assert ready.status_code == 200 and ready.get_json()["status"] == "ready"
    fake_queue.alive = False
    unready = client.get("/readyz")
    assert unready.status_code == 503 and int(unready.headers["Retry-After"]) >= 1
    assert unready.get_json() == {"status": "unready", "store": True, "queue": True,
                                  "workers": False}
    fake_queue.alive, fake_queue.reachable = True, False
    assert client.get("/readyz").get_json()["queue"] is False


def test_readyz_when_the_store_is_down(fake_queue, tmp_path):
    from workers.store import open_stores

    dead = open_stores("redis://127.0.0.1:1/0")  # nothing listens on port 1
    client = create_app(api_config(dead, fake_queue)).test_client()
    response = client.get("/readyz")
    assert response.status_code == 503 and response.get_json()["store"] is False


def test_settings_from_the_environment():
    from service.config import app_config, tenant_limit

    config = app_config(environ={"BALLAST_MAX_BODY_BYTES": "1000", "BALLAST_RATE_LIMIT": "7",
                                 "BALLAST_TENANT_LIMITS": '{"big": {"rate_limit": 70}}'})
    assert config["BALLAST_MAX_BODY_BYTES"] == 1000
    assert tenant_limit(config, "small", "rate_limit") == 7
    assert tenant_limit(config, "big", "rate_limit") == 70
    assert tenant_limit(config, "big", "max_unfinished") == config["BALLAST_MAX_UNFINISHED"]


def test_an_unexpected_error_is_a_500_problem_without_details(api_stores, fake_queue):
    app = create_app(api_config(api_stores, fake_queue))

    @app.get("/boom")
    def boom():
        raise RuntimeError("secret internals")

    response = app.test_client().get("/boom")
    body = _is_problem(response, 500)
    assert "secret" not in response.get_data(as_text=True) and body["type"] == "about:blank"
